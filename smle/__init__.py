"""smle: simulated maximum likelihood for latent-factor volatility models.

Importing smle enables JAX's 64-bit mode for the process (all computation is float64) and
its persistent compilation cache in a user cache folder; see :mod:`smle._config`. The public
names below are imported when first used, so that ``import smle`` (and ``smle --help``) does
not wait for JAX.
"""

import importlib
import sys
import types

from smle import _config

_config.configure()

from smle.errors import EISBreakdownError, SmleInputError  # noqa: E402

__version__ = "0.1.0"

# public name -> the module that defines it
_PUBLIC = {
    "LoglikResult": "smle.likelihood",
    "loglik": "smle.likelihood",
    "simulate": "smle.likelihood",
    "fit": "smle.fit",
    "FitResult": "smle.results",
    "Model": "smle.models",
    "get_model": "smle.models",
    "model_names": "smle.models",
    "register": "smle.models",
    "FilterResult": "smle.diagnostics.filtering",
    "filter_factor": "smle.diagnostics.filtering",
    "Diagnostics": "smle.diagnostics.gof",
    "diagnose": "smle.diagnostics.gof",
    "HealthReport": "smle.diagnostics.health",
    "check": "smle.diagnostics.health",
    "Comparison": "smle.decision.compare",
    "compare": "smle.decision.compare",
    "Forecast": "smle.decision.forecast",
    "forecast": "smle.decision.forecast",
    "Backtest": "smle.decision.backtest",
    "backtest": "smle.study.backtest_runs",  # smle.decision.backtest.backtest, with an optional store
}


def __getattr__(name):
    """Import a public name's module on first use (module ``__getattr__``, PEP 562)."""
    if name == "reference":
        value = importlib.import_module("smle.reference")
    elif name in _PUBLIC:
        value = getattr(importlib.import_module(_PUBLIC[name]), name)
    else:
        raise AttributeError(f"module 'smle' has no attribute {name!r}")
    _config.configure()  # again, in case JAX was imported before smle by someone who changed it
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_PUBLIC) | {"reference"})


class _Package(types.ModuleType):
    """The package module: ``smle.fit`` stays the function when the submodule ``smle.fit`` is
    imported (the import system would otherwise bind the submodule to the attribute)."""

    def __setattr__(self, name, value):
        if name == "fit" and isinstance(value, types.ModuleType):
            value = value.fit
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package


__all__ = [
    "Backtest",
    "Comparison",
    "Diagnostics",
    "FilterResult",
    "FitResult",
    "HealthReport",
    "backtest",
    "check",
    "compare",
    "diagnose",
    "filter_factor",
    "fit",
    "Forecast",
    "forecast",
    "LoglikResult",
    "Model",
    "SmleInputError",
    "EISBreakdownError",
    "get_model",
    "loglik",
    "model_names",
    "reference",
    "register",
    "simulate",
]
