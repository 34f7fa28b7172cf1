"""The public simulated likelihood: :func:`loglik`, :func:`simulate` and input checks.

``loglik`` validates its inputs, then calls one JIT-compiled EIS kernel per (model, settings,
data shape); parameters, data values and seeds are traced, so new values reuse the compiled
program.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from typing import Mapping, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine import eis
from smle.errors import SmleInputError, describe
from smle.models import Model, get_model
from smle.params import check_params

MIN_DRAWS = 4


@dataclasses.dataclass(frozen=True)
class LoglikResult:
    """A simulated log-likelihood with its accuracy diagnostics.

    Attributes:
      value: EIS estimate of log L (natural log, summed over periods).
      nse: numerical standard error of ``value`` from this run's weights (delta method; with
        antithetic draws, over the independent pairs).
      ess: effective sample size of the scoring weights, (sum w)^2 / sum w^2.
      iterations: EIS iterations used after the Newton start.
      converged: whether the auxiliary parameters stopped moving within ``tol``.
      last_change: largest relative change of the auxiliary parameters at the last iteration.
      n_draws, antithetic, seed: the estimator settings used.
      log_weights: log importance weights of the scoring paths, shape (S,).
      paths: the scoring paths of the latent state, shape (T, S).
      b_obs, c_obs: fitted auxiliary parameters, shape (T,).
      r_squared: per-period R^2 of the final EIS regressions, shape (T,).
      n_score_draws: paths in the scoring set (``log_weights`` and ``paths`` have this many).
      control_variates: the control variates applied (None, "independent", "draws" or "both");
        with any, ``value`` and ``nse`` are the corrected ones.
      value_uncorrected, nse_uncorrected: the plain EIS estimate and its NSE.
      cv_coefficients: the control-variate coefficients by name ("independent", "draws_he2", ...).
      independent_error: with the independent control, the EIS estimate at the independent
        parameters minus its exact value, with the same random numbers (the error corrected for).
    """

    value: float
    nse: float
    ess: float
    iterations: int
    converged: bool
    last_change: float
    n_draws: int
    antithetic: bool
    seed: int
    log_weights: np.ndarray
    paths: np.ndarray
    b_obs: np.ndarray
    c_obs: np.ndarray
    r_squared: np.ndarray
    n_score_draws: int | None = None
    control_variates: str | None = None
    value_uncorrected: float | None = None
    nse_uncorrected: float | None = None
    cv_coefficients: dict | None = None
    independent_error: float | None = None

    @property
    def value_bias_corrected(self) -> float:
        """``value + nse^2 / 2``: the first-order bias correction of log mean w (Durbin and Koopman 1997)."""
        return self.value + 0.5 * self.nse**2

    def smoothed_mean(self) -> np.ndarray:
        """Posterior mean of the latent state per period from the weighted scoring paths."""
        w = np.exp(self.log_weights - self.log_weights.max())
        return self.paths @ (w / w.sum())

    def __repr__(self) -> str:
        flag = "converged" if self.converged else "NOT converged"
        control = f", control_variates={self.control_variates!r}" if self.control_variates else ""
        return (
            f"LoglikResult(value={self.value:.4f}, nse={self.nse:.4f}, ess={self.ess:.1f}/{self.log_weights.shape[0]}"
            f"{control}, {flag} in {self.iterations} iterations)"
        )


# ---------------------------------------------------------------------------------------------
# Input checks


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


def _check_draws(argument: str, n_draws, antithetic) -> None:
    if isinstance(n_draws, bool) or not isinstance(n_draws, (int, np.integer)) or n_draws < MIN_DRAWS:
        raise SmleInputError(f"{argument} = {n_draws!r} is not accepted; accepted: an integer >= {MIN_DRAWS}")
    if antithetic and n_draws % 2:
        raise SmleInputError(
            f"{argument} = {n_draws} must be even with antithetic draws (pairs); "
            "use an even number or antithetic=False"
        )


def check_settings(n_draws, antithetic, tol, max_iter, n_score_draws=None) -> eis.EISSettings:
    """Validate estimator settings and return them as :class:`~smle.engine.eis.EISSettings`."""
    _check_draws("n_draws", n_draws, antithetic)
    if n_score_draws is not None:
        _check_draws("n_score_draws", n_score_draws, antithetic)
    if not (isinstance(tol, (int, float)) and math.isfinite(tol) and tol > 0):
        raise SmleInputError(f"tol = {tol!r} is not accepted; accepted: a positive number such as 1e-6")
    if isinstance(max_iter, bool) or not isinstance(max_iter, (int, np.integer)) or max_iter < 1:
        raise SmleInputError(f"max_iter = {max_iter!r} is not accepted; accepted: an integer >= 1")
    score = None if n_score_draws is None or int(n_score_draws) == int(n_draws) else int(n_score_draws)
    return eis.EISSettings(n_draws=int(n_draws), antithetic=bool(antithetic), tol=float(tol), max_iter=int(max_iter),
                           n_score_draws=score)


CONTROL_VARIATES = (None, "independent", "draws", "both")


class ControlSpec(NamedTuple):
    """Which control variates to apply (static: part of the compiled program's identity).

    Attributes:
      independent: the independent-factor control (EIS at the parameters with the factor
        autocorrelation set to zero, same random numbers, against its exact likelihood).
      draws: the pooled Hermite statistics of the scoring normals.
      coefficient: the independent control's coefficient; None: the run's log-weight regression.
    """

    independent: bool = False
    draws: bool = False
    coefficient: float | None = None

    @property
    def label(self) -> str | None:
        if self.independent and self.draws:
            return "both"
        return "independent" if self.independent else ("draws" if self.draws else None)

    def names(self, antithetic: bool) -> list[str]:
        out = ["independent"] if self.independent else []
        if self.draws:
            out += [f"draws_he{k}" for k in eis.HERMITE_ORDERS[antithetic]]
        return out


def check_control(model: Model, control_variates, cv_coefficient="regression") -> ControlSpec:
    """Validate the control-variate choice for ``model`` and return a :class:`ControlSpec`."""
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



def checked_inputs(model, params, y):
    """Resolve the model and validate its parameters and data: ``(model, params, y)``."""
    model = get_model(model)
    checked = check_params(model.name, model.constraints(), params)
    model.check_joint(checked)
    return model, checked, check_observations(model, y)


def as_key(seed) -> jax.Array:
    """A JAX PRNG key from an integer seed (or a key, returned as it is)."""
    if isinstance(seed, (jax.Array, np.ndarray)) and jnp.issubdtype(jnp.asarray(seed).dtype, jnp.unsignedinteger):
        return jnp.asarray(seed)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise SmleInputError(f"seed = {seed!r} is not accepted; accepted: a non-negative integer or a JAX PRNG key")
    return jax.random.PRNGKey(int(seed))


# ---------------------------------------------------------------------------------------------
# The kernel


def eis_output(model: Model, settings: eis.EISSettings, params: Mapping, y, key) -> eis.EISOutput:
    """Pure, differentiable EIS evaluation of ``model`` at ``params`` (a mapping of JAX scalars)."""
    data = model.prepare(params, y)
    return eis.eis_loglik(
        model.latent(params), _log_obs_function(model), (params, data), model.mode_guess(params, data), key, settings
    )


@functools.lru_cache(maxsize=None)
def _log_obs_function(model: Model):
    """``(obs_args, paths) -> log g_t``: one function object per model, so compiled code is reused."""

    def log_obs(obs_args, paths):
        params, data = obs_args
        return model.log_obs_density(params, data, paths)

    return log_obs


def controlled_output(model: Model, settings: eis.EISSettings, control: ControlSpec, params: Mapping, y, key):
    """EIS evaluation with control variates: ``(out, extra)``, pure and differentiable.

    ``extra`` holds the corrected value and NSE, the coefficients, and with the independent
    control the error of EIS at the independent-factor parameters (same random numbers).
    Without control variates the corrected value is ``out.value``.
    """
    out = eis_output(model, settings, params, y, key)
    controls, log_controls, errors, extra = [], [], [], {}
    if control.independent:
        independent = model.independent_params(params)
        out_independent = eis_output(model, settings, independent, y, key)
        exact = model.independent_loglik(params, y)
        error = out_independent.value - exact
        # w0_s / L0 = exp(log w0_s - value0) exp(value0 - log L0): no overflow for any usable run
        controls.append(jnp.exp(out_independent.log_weights - out_independent.value) * jnp.exp(error))
        log_controls.append(out_independent.log_weights)
        errors.append(error)
        extra["independent_error"] = error
    if control.draws:
        _, score_normals = eis.standard_normals(key, out.paths.shape[0], settings)
        statistics = eis.draw_statistics(score_normals, settings.antithetic)
        for j in range(statistics.shape[1]):
            controls.append(statistics[:, j])
            log_controls.append(statistics[:, j])
            errors.append(jnp.mean(statistics[:, j]))
    if controls:
        fixed = [control.coefficient] if control.independent and control.coefficient is not None else []
        target = out.log_weights - (fixed[0] * log_controls[0] if fixed else 0.0)
        free = log_controls[len(fixed):]  # regressed jointly, after any fixed coefficient
        coefficients = jnp.concatenate([
            jnp.asarray(fixed, out.value.dtype),
            eis.log_weight_coefficients(target, jnp.stack(free, axis=1), settings.antithetic) if free
            else jnp.zeros((0,), out.value.dtype),
        ])
        value, nse = eis.control_variate_correction(
            out.log_weights, out.value, jnp.stack(controls, axis=1), jnp.stack(errors), coefficients, settings.antithetic
        )
        extra.update(value=value, nse=nse, coefficients=coefficients)
    else:
        extra["value"] = out.value
    return out, extra


@functools.lru_cache(maxsize=None)
def compiled_eis(model: Model, settings: eis.EISSettings, control: ControlSpec = ControlSpec()):
    """The JIT-compiled EIS kernel for a model, settings and control variates (once per data shape)."""

    def run(params, y, key):
        out, extra = controlled_output(model, settings, control, params, y, key)
        diagnostics = eis.weight_diagnostics(out.log_weights, settings.antithetic)
        return out, diagnostics, extra

    return jax.jit(run)


def loglik(
    model,
    params: Mapping[str, float],
    y,
    n_draws: int = 64,
    seed=0,
    antithetic: bool = True,
    tol: float = 1e-6,
    max_iter: int = 50,
    n_score_draws: int | None = None,
    control_variates: str | None = None,
    cv_coefficient="regression",
) -> LoglikResult:
    """EIS estimate of the log-likelihood of ``model`` at ``params`` on observations ``y``.

    Args:
      model: a registered model name (see ``smle.model_names()``) or a model instance.
      params: parameter values by name, in the model's natural parameterisation.
      y: observations, shape (T,) (or (T, n_series) for multi-series models).
      n_draws: simulated paths S of the fitting draw set (and of the scoring set by default).
      seed: non-negative integer or JAX PRNG key; the common random numbers derive from it.
      antithetic: pair each draw with its negation.
      tol: EIS convergence tolerance on the relative change of the auxiliary parameters.
      max_iter: cap on EIS iterations.
      n_score_draws: paths of the scoring set, if not ``n_draws`` (a larger set is cheap: one pass).
      control_variates: None; "independent" (EIS at the parameters with the factor
        autocorrelation set to zero, with the same random numbers, corrected by its exact
        likelihood: closed form or adaptive Gauss-Hermite); "draws" (pooled Hermite statistics
        of the scoring normals, of known mean zero; coefficients by the same log-weight
        regression); or "both". ``value`` and ``nse`` are then the corrected estimate and its
        NSE (delta method on the corrected weights).
      cv_coefficient: coefficient of the independent control. "regression" (default): from the
        least-squares regression of this run's log weights (antithetic pair means) on the
        independent case's (same draws) and on the draw statistics; it tracks the coefficient
        that minimises the variance across seeds (experiments/results/control_variates.md). A number fixes it: 1.0 subtracts the
        independent case's error as it is, which at rho = 0.9 made the variance 7 times larger.
        (A regression of the weights themselves, not their logs, is thrown off by heavy tails.)

    Returns:
      A :class:`LoglikResult`.

    References:
      Richard and Zhang (2007), J. Econometrics 141; Durbin and Koopman (1997), Biometrika 84.
    """
    model, checked, y = checked_inputs(model, params, y)
    settings = check_settings(n_draws, antithetic, tol, max_iter, n_score_draws)
    control = check_control(model, control_variates, cv_coefficient)
    key = as_key(seed)
    params_jax = {k: jnp.asarray(v, float) for k, v in checked.items()}
    out, diagnostics, extra = compiled_eis(model, settings, control)(params_jax, jnp.asarray(y), key)
    value = float(extra["value"])
    if not math.isfinite(value):
        raise FloatingPointError(
            f"the EIS log-likelihood of model '{model.name}' is not finite at params={checked}; "
            "the sampler failed (check the data scale, e.g. returns in percent, and the parameters)"
        )
    corrected = {}
    if control.label is not None:
        corrected = dict(
            control_variates=control.label,
            value_uncorrected=float(out.value),
            nse_uncorrected=float(diagnostics["nse"]),
            cv_coefficients=dict(zip(control.names(settings.antithetic), np.asarray(extra["coefficients"]).tolist())),
            independent_error=float(extra["independent_error"]) if "independent_error" in extra else None,
        )
    return LoglikResult(
        value=value,
        nse=float(extra["nse"]) if control.label is not None else float(diagnostics["nse"]),
        ess=float(diagnostics["ess"]),
        iterations=int(out.info.iterations),
        converged=bool(out.info.converged),
        last_change=float(out.info.last_change),
        n_draws=settings.n_draws,
        antithetic=settings.antithetic,
        seed=seed if isinstance(seed, int) else -1,
        log_weights=np.asarray(out.log_weights),
        paths=np.asarray(out.paths),
        b_obs=np.asarray(out.auxiliary.b_obs),
        c_obs=np.asarray(out.auxiliary.c_obs),
        r_squared=np.asarray(out.info.r_squared),
        n_score_draws=settings.score_draws,
        **corrected,
    )


def simulate(model, params: Mapping[str, float], n_periods: int, seed=0):
    """Simulate ``n_periods`` observations and the latent path from ``model`` at ``params``.

    Returns:
      ``(y, x)`` as NumPy arrays: observations of shape (T,) or (T, n_series), latent path (T,).
    """
    model = get_model(model)
    checked = check_params(model.name, model.constraints(), params)
    model.check_joint(checked)
    if isinstance(n_periods, bool) or not isinstance(n_periods, (int, np.integer)) or n_periods < 1:
        raise SmleInputError(f"n_periods = {n_periods!r} is not accepted; accepted: a positive integer")
    key = as_key(seed)
    params_jax = {k: jnp.asarray(v, float) for k, v in checked.items()}
    y, x = _simulate_jit(model, params_jax, int(n_periods), key)
    return np.array(y), np.array(x)


@functools.partial(jax.jit, static_argnums=(0, 2))
def _simulate_jit(model, params, n_periods, key):
    return model.simulate(params, n_periods, key)
