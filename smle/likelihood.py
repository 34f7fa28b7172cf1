"""The public simulated likelihood: :func:`loglik`, :func:`simulate` and input checks.

``loglik`` validates its inputs, then calls one JIT-compiled EIS kernel per (model, settings,
data shape); parameters, data values and seeds are traced, so new values reuse the compiled
program.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from typing import Mapping

import jax
import jax.numpy as jnp
import numpy as np

from smle import eis
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
        return (
            f"LoglikResult(value={self.value:.4f}, nse={self.nse:.4f}, ess={self.ess:.1f}/{self.n_draws}, "
            f"{flag} in {self.iterations} iterations)"
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


def check_settings(n_draws, antithetic, tol, max_iter) -> eis.EISSettings:
    """Validate estimator settings and return them as :class:`~smle.eis.EISSettings`."""
    if isinstance(n_draws, bool) or not isinstance(n_draws, (int, np.integer)) or n_draws < MIN_DRAWS:
        raise SmleInputError(f"n_draws = {n_draws!r} is not accepted; accepted: an integer >= {MIN_DRAWS}")
    if antithetic and n_draws % 2:
        raise SmleInputError(
            f"n_draws = {n_draws} must be even with antithetic draws (pairs); "
            "use an even number or antithetic=False"
        )
    if not (isinstance(tol, (int, float)) and math.isfinite(tol) and tol > 0):
        raise SmleInputError(f"tol = {tol!r} is not accepted; accepted: a positive number such as 1e-6")
    if isinstance(max_iter, bool) or not isinstance(max_iter, (int, np.integer)) or max_iter < 1:
        raise SmleInputError(f"max_iter = {max_iter!r} is not accepted; accepted: an integer >= 1")
    return eis.EISSettings(n_draws=int(n_draws), antithetic=bool(antithetic), tol=float(tol), max_iter=int(max_iter))


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


@functools.lru_cache(maxsize=None)
def compiled_eis(model: Model, settings: eis.EISSettings):
    """The JIT-compiled EIS kernel for a model and settings (compiled once per data shape)."""

    def run(params, y, key):
        out = eis_output(model, settings, params, y, key)
        diagnostics = eis.weight_diagnostics(out.log_weights, settings.antithetic)
        return out, diagnostics

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
) -> LoglikResult:
    """EIS estimate of the log-likelihood of ``model`` at ``params`` on observations ``y``.

    Args:
      model: a registered model name (see ``smle.model_names()``) or a model instance.
      params: parameter values by name, in the model's natural parameterisation.
      y: observations, shape (T,) (or (T, n_series) for multi-series models).
      n_draws: simulated paths per draw set (the fitting set and the scoring set each have S).
      seed: non-negative integer or JAX PRNG key; the common random numbers derive from it.
      antithetic: pair each draw with its negation.
      tol: EIS convergence tolerance on the relative change of the auxiliary parameters.
      max_iter: cap on EIS iterations.

    Returns:
      A :class:`LoglikResult`.

    References:
      Richard and Zhang (2007), J. Econometrics 141; Durbin and Koopman (1997), Biometrika 84.
    """
    model, checked, y = checked_inputs(model, params, y)
    settings = check_settings(n_draws, antithetic, tol, max_iter)
    key = as_key(seed)
    params_jax = {k: jnp.asarray(v, float) for k, v in checked.items()}
    out, diagnostics = compiled_eis(model, settings)(params_jax, jnp.asarray(y), key)
    value = float(out.value)
    if not math.isfinite(value):
        raise FloatingPointError(
            f"the EIS log-likelihood of model '{model.name}' is not finite at params={checked}; "
            "the sampler failed (check the data scale, e.g. returns in percent, and the parameters)"
        )
    return LoglikResult(
        value=value,
        nse=float(diagnostics["nse"]),
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
