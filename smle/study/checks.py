"""Validation of study definitions: each design against the model registry and the estimator's
rules, the study's seed and names, and designs that share their simulated data (``data_from``).

Works on :class:`smle.study.spec.Design` and :class:`~smle.study.spec.Study` objects through
their fields (``dataclasses.replace``), so that it needs no import of their module.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Mapping

import numpy as np

from smle.errors import SmleInputError, describe

_START_CHOICES = ("data", "truth")


def _is_int(value) -> bool:
    return isinstance(value, (int, np.integer)) and not isinstance(value, bool)


def _check_int(where: str, name: str, value, minimum: int) -> int:
    from smle.validation import check_integer

    try:
        return check_integer(name, value, minimum)
    except SmleInputError as error:
        raise SmleInputError(f"{where}: {error}") from None


def check_design(design):
    """Validate a design against the model registry and the estimator's rules; return it normalised."""
    from smle.validation import check_settings
    from smle.models import get_model
    from smle.params import check_params

    if not isinstance(design.name, str) or not design.name.strip():
        raise SmleInputError(f"design name = {describe(design.name)} is not accepted; accepted: a non-empty string")
    where = f"design '{design.name}'"
    try:
        model = get_model(design.model, **dict(design.model_options))
    except SmleInputError as error:
        raise SmleInputError(f"{where}: {error}") from None
    try:
        params = check_params(model.name, model.constraints(), design.params)
    except SmleInputError as error:
        raise SmleInputError(f"{where}: {error}") from None
    n_periods = _check_int(where, "n_periods", design.n_periods, 2)
    replications = _check_int(where, "replications", design.replications, 1)
    e = design.estimator
    try:
        check_settings(e.n_draws, e.antithetic, e.tol, e.max_iter, None, model, n_periods, "fit")
    except SmleInputError as error:
        raise SmleInputError(f"{where}: {error}") from None
    _check_int(where, "n_seeds", e.n_seeds, 1)
    _check_int(where, "seed_offset", e.seed_offset, 0)
    _check_int(where, "max_steps", e.max_steps, 1)
    if e.method not in ("eis", "exact", "auto"):
        raise SmleInputError(f"{where}: method = {describe(e.method)} is not accepted; accepted: eis, exact, auto")
    if design.data_from is not None and not (isinstance(design.data_from, str) and design.data_from.strip()):
        raise SmleInputError(f"{where}: data_from = {describe(design.data_from)} is not accepted; accepted: "
                             "the name of another design of the study")
    if e.start not in _START_CHOICES:
        raise SmleInputError(f"{where}: start = {describe(e.start)} is not accepted; accepted: {', '.join(_START_CHOICES)}")
    for name in ("gtol", "tol"):
        value = getattr(e, name)
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not (math.isfinite(value) and value > 0):
            raise SmleInputError(f"{where}: {name} = {describe(value)} is not accepted; accepted: a positive number")
    if isinstance(e.level, bool) or not isinstance(e.level, float) or not 0.5 <= e.level < 1:
        raise SmleInputError(f"{where}: level = {describe(e.level)} is not accepted; accepted: a number in [0.5, 1)")
    estimator = dataclasses.replace(e, gtol=float(e.gtol), tol=float(e.tol), antithetic=bool(e.antithetic))
    return dataclasses.replace(design, model=model.name, params=params, n_periods=n_periods,
                               replications=replications, estimator=estimator,
                               model_options=dict(design.model_options))


def check_study(study):
    """Validate every design, the master seed and the design names; return the study normalised."""
    if not _is_int(study.master_seed) or study.master_seed < 0:
        raise SmleInputError(f"master_seed = {describe(study.master_seed)} is not accepted; accepted: a non-negative integer")
    if not study.designs:
        raise SmleInputError(f"study '{study.name}' has no designs; accepted: at least one [[design]] table")
    designs = tuple(check_design(d) for d in study.designs)
    names = [d.name for d in designs]
    repeated = sorted({n for n in names if names.count(n) > 1})
    if repeated:
        raise SmleInputError(f"design names must be unique; repeated: {', '.join(repeated)}")
    check_shared_data(designs)
    return dataclasses.replace(study, designs=designs, master_seed=int(study.master_seed))


_SHARED_FIELDS = ("model", "model_options", "params", "n_periods")


def check_shared_data(designs) -> None:
    """Refuse a ``data_from`` that names no other design, a design that itself takes its data
    from another, or one whose data would differ (model, model_options, params, n_periods)."""
    by_name = {d.name: d for d in designs}
    for design in designs:
        source_name = design.data_from
        if source_name is None:
            continue
        where = f"design '{design.name}': data_from = {source_name!r}"
        if source_name == design.name or source_name not in by_name:
            others = [n for n in by_name if n != design.name]
            raise SmleInputError(f"{where} is not accepted; accepted: the name of another design of the study "
                                 f"({', '.join(others) if others else 'it has no other'})")
        source = by_name[source_name]
        if source.data_from is not None:
            raise SmleInputError(f"{where} names a design that takes its own data from '{source.data_from}'; "
                                 f"accepted: a design without data_from (write data_from = {source.data_from!r})")
        for field in _SHARED_FIELDS:
            mine, theirs = getattr(design, field), getattr(source, field)
            if (dict(mine) if isinstance(mine, Mapping) else mine) != (dict(theirs) if isinstance(theirs, Mapping) else theirs):
                raise SmleInputError(
                    f"{where}: the two designs would simulate different data: {field} is {describe(mine)} in "
                    f"'{design.name}' and {describe(theirs)} in '{source.name}'; accepted: the same model, "
                    f"model_options, params and n_periods")
