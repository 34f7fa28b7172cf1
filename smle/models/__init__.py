"""The model registry: models by short name.

``get_model("sv")`` returns a model instance; options are passed to its constructor, e.g.
``get_model("local-level", init_var=1e8)``. ``model_names()`` lists what is registered.
A new model is one module that defines a :class:`~smle.models.base.Model` subclass decorated
with :func:`register`, imported at the bottom of this file.
"""

from __future__ import annotations

import numpy as np

from smle.errors import SmleInputError
from smle.models.base import Model, model_options

_REGISTRY: dict[str, type[Model]] = {}


def register(cls: type[Model]) -> type[Model]:
    """Class decorator adding a model to the registry under ``cls.name``."""
    if not cls.name:
        raise ValueError(f"{cls.__name__} has no name")
    if len(cls.series_labels) < cls.n_series:
        raise ValueError(f"{cls.__name__} has {cls.n_series} series but series_labels {cls.series_labels}")
    if cls.name in _REGISTRY and _REGISTRY[cls.name] is not cls:
        raise ValueError(f"a model named '{cls.name}' is already registered")
    _REGISTRY[cls.name] = cls
    return cls


def model_names() -> list[str]:
    """Registered short names, sorted."""
    return sorted(_REGISTRY)


def get_model(name, **options) -> Model:
    """The model registered as ``name`` (a model instance is returned unchanged)."""
    if isinstance(name, Model):
        if options:
            raise SmleInputError("options can only be given with a model name, not a model instance")
        return name
    if name not in _REGISTRY:
        raise SmleInputError(
            f"model = {name!r} is not a registered model; available: {', '.join(model_names())}"
        )
    try:
        return _REGISTRY[name](**options)
    except TypeError as error:
        raise SmleInputError(f"bad options for model '{name}': {error}") from None


def saved_model(name: str, options: dict | None) -> Model:
    """The model a saved result names, built from its saved options (results written before options
    were filtered carry the model's class attributes among them; only constructor fields are passed)."""
    import dataclasses

    fields = {f.name for f in dataclasses.fields(type(get_model(name)))}
    return get_model(name, **{k: v for k, v in (options or {}).items() if k in fields})


def model_title(name: str, options: dict | None = None) -> str:
    """The registry name with the options that differ from the model's defaults, for report titles:
    ``garch-mix (mixing=lognormal)``, plain ``sv`` for a model with its defaults."""
    options = dict(options or {})
    try:
        defaults = model_options(get_model(name))
    except SmleInputError:
        defaults = options  # a model without defaults for every option: show them all

    def same(a, b) -> bool:
        try:
            return bool(np.all(np.asarray(a) == np.asarray(b))) and np.shape(a) == np.shape(b)
        except (TypeError, ValueError):
            return False

    # keys that are not constructor options (class attributes in results saved by early versions) are left out
    shown = [f"{k}={v}" for k, v in options.items() if k in defaults and (defaults is options or not same(v, defaults[k]))]
    return name + (f" ({', '.join(shown)})" if shown else "")


from smle.models import ar1_noise, garch, garch_mix, realized_sv, sv, sv_t  # noqa: E402,F401  (registration)
from smle.models import factor_sv, sv_2factor, sv_leverage, var1_noise  # noqa: E402,F401  (registration)

__all__ = ["Model", "get_model", "model_names", "register"]
