"""Input checks shared by every entry point (loglik, simulate, fit, check, filter_factor, diagnose,
the grid reference and the study designs): each check is written once, here.

Every check raises :class:`~smle.errors.SmleInputError` naming the argument, the value and
what is accepted.
"""

from __future__ import annotations

import math
from typing import Mapping

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine import eis, eis_multi
from smle.engine.control import CONTROL_VARIATES, ControlSpec
from smle.errors import SmleInputError, describe
from smle.models import Model, get_model
from smle.params import check_params

MIN_DRAWS = 4


def check_integer(name: str, value, minimum: int, note: str = "", even: bool = False) -> int:
    """``value`` as an int if it is an integer (not a bool) >= ``minimum``; ``even``: draws in
    antithetic pairs. ``note`` is added to the message in parentheses."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise SmleInputError(f"{name} = {describe(value)} is not accepted; accepted: an integer >= {minimum}"
                             + (f" ({note})" if note else ""))
    if even and value % 2:
        raise SmleInputError(
            f"{name} = {value} must be even with antithetic draws (pairs); use an even number or antithetic=False"
        )
    return int(value)


def check_observations(model: Model, y) -> np.ndarray:
    """Validate observations for ``model``: numeric, finite, right shape, long enough."""
    try:
        array = np.asarray(y, dtype=float)
    except (TypeError, ValueError):
        raise SmleInputError(
            f"y must be numeric observations (an array of shape (T,) for model '{model.name}'); "
            f"got {describe(y)}"
        ) from None
    expected = "(T,)" if model.n_series == 1 else f"(T, {model.n_series})"
    if model.n_series == 1 and array.ndim == 2 and array.shape[1] == 1:
        array = array[:, 0]
    if (model.n_series == 1 and array.ndim != 1) or (
        model.n_series > 1 and (array.ndim != 2 or array.shape[1] != model.n_series)
    ):
        raise SmleInputError(
            f"y has shape {array.shape}; model '{model.name}' expects shape {expected}"
        )
    if array.shape[0] < model.min_periods:
        raise SmleInputError(
            f"y has {array.shape[0]} periods; model '{model.name}' needs at least {model.min_periods}"
        )
    bad = ~np.isfinite(array)
    if bad.any():
        rows = np.flatnonzero(bad.reshape(array.shape[0], -1).any(axis=1))
        shown = ", ".join(str(int(r)) for r in rows[:10]) + (" ..." if rows.size > 10 else "")
        raise SmleInputError(
            f"y has {rows.size} non-finite value(s) (NaN or inf) at row(s) {shown}; "
            "accepted: finite numbers only (drop or fill those rows first)"
        )
    return model.check_data(array)


def check_settings(n_draws, antithetic, tol, max_iter, n_score_draws=None) -> eis.EISSettings:
    """Validate estimator settings and return them as :class:`~smle.engine.eis.EISSettings`."""
    check_integer("n_draws", n_draws, MIN_DRAWS, even=antithetic)
    if n_score_draws is not None:
        check_integer("n_score_draws", n_score_draws, MIN_DRAWS, even=antithetic)
    if not (isinstance(tol, (int, float)) and math.isfinite(tol) and tol > 0):
        raise SmleInputError(f"tol = {tol!r} is not accepted; accepted: a positive number such as 1e-6")
    check_integer("max_iter", max_iter, 1)
    score = None if n_score_draws is None or int(n_score_draws) == int(n_draws) else int(n_score_draws)
    return eis.EISSettings(n_draws=int(n_draws), antithetic=bool(antithetic), tol=float(tol), max_iter=int(max_iter),
                           n_score_draws=score)


def check_control(model: Model, control_variates, cv_coefficient="regression") -> ControlSpec:
    """Validate the control-variate choice for ``model`` and return a :class:`ControlSpec`.

    Every simulated-likelihood entry point calls this, so a model without a latent state (whose
    likelihood is exact) is turned away here with the reason."""
    if model.state_dim == 0:
        raise SmleInputError(
            f"model '{model.name}' has no latent state: its likelihood is exact (closed form), so there is no "
            "simulation and no simulation error to measure, check or reduce; use smle.loglik or smle.fit"
        )
    if control_variates is not None and model.state_dim > 1:
        raise SmleInputError(
            f"control_variates = {control_variates!r}: control variates are not yet available for a "
            f"{model.state_dim}-dimensional state (model '{model.name}'); accepted: None"
        )
    if control_variates not in CONTROL_VARIATES:
        raise SmleInputError(
            f"control_variates = {control_variates!r} is not accepted; accepted: "
            + ", ".join(repr(c) for c in CONTROL_VARIATES)
        )
    independent = control_variates in ("independent", "both")
    if independent and not model.has_independent_case:
        raise SmleInputError(
            f"control_variates = {control_variates!r}: model '{model.name}' has no independent-factor case "
            "(its state is not stationary, so there is no autocorrelation to set to zero); "
            "use control_variates='draws'"
        )
    if isinstance(cv_coefficient, str) and cv_coefficient == "regression":
        coefficient = None
    elif isinstance(cv_coefficient, (int, float, np.floating)) and not isinstance(cv_coefficient, bool) \
            and math.isfinite(cv_coefficient):
        coefficient = float(cv_coefficient)
    else:
        raise SmleInputError(
            f"cv_coefficient = {cv_coefficient!r} is not accepted; accepted: 'regression' (the slope of the log "
            "weights on the independent case's log weights, from this run) or a finite number such as 1.0"
        )
    return ControlSpec(independent=independent, draws=control_variates in ("draws", "both"), coefficient=coefficient)


def check_state_settings(model: Model, settings: eis.EISSettings) -> None:
    """For a k-dimensional state (k > 1): the model's regression basis is valid and both draw
    sets identify it (:func:`smle.engine.eis_multi.check_draws`)."""
    k = model.state_dim
    if k <= 1:
        return
    pairs = eis_multi.check_pairs(model.pairs() or eis_multi.full_pairs(k), k)
    eis_multi.check_draws(settings.n_draws, k, pairs, settings.antithetic)
    if settings.n_score_draws is not None:
        eis_multi.check_draws(settings.n_score_draws, 0, (), settings.antithetic)


def require_scalar_state(model: Model, what: str) -> None:
    """Raise SmleInputError if ``what`` (a function name) is asked of a model with k > 1."""
    if model.state_dim > 1:
        raise SmleInputError(
            f"{what} is not yet available for a k-dimensional state: model '{model.name}' has k = "
            f"{model.state_dim}; accepted: models with a one-dimensional state (smle.loglik and smle.fit "
            "work for both)"
        )


def checked_params(model: Model, params) -> dict[str, float]:
    """``params`` checked against the model's constraints and joint constraints (floats by name)."""
    checked = check_params(model.name, model.constraints(), params)
    model.check_joint(checked)
    return checked


def checked_inputs(model, params, y):
    """Resolve the model and validate its parameters and data: ``(model, params, y)``."""
    model = get_model(model)
    return model, checked_params(model, params), check_observations(model, y)


def jax_params(checked: Mapping[str, float]) -> dict:
    """Checked parameters as float64 JAX scalars (traced, so new values reuse compiled code)."""
    return {k: jnp.asarray(v, float) for k, v in checked.items()}


def as_key(seed) -> jax.Array:
    """A JAX PRNG key from an integer seed (or a key, returned as it is)."""
    if isinstance(seed, (jax.Array, np.ndarray)) and jnp.issubdtype(jnp.asarray(seed).dtype, jnp.unsignedinteger):
        return jnp.asarray(seed)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise SmleInputError(f"seed = {seed!r} is not accepted; accepted: a non-negative integer or a JAX PRNG key")
    return jax.random.PRNGKey(int(seed))
