"""The public simulated likelihood: :func:`loglik`, :func:`simulate` and :class:`LoglikResult`.

``loglik`` validates its inputs (:mod:`smle.validation`), then calls one JIT-compiled kernel per
(model, settings, data shape) from :mod:`smle.engine.methods`; parameters, data values and seeds
are traced, so new values reuse the compiled program.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from typing import Mapping

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine.control import control_facts
from smle.engine.methods import eis_entry
from smle.models import get_model
from smle.validation import (
    as_key, check_control, check_integer, check_settings, check_state_settings, checked_inputs, checked_params,
    jax_params,
)


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
      paths: the scoring paths of the latent state, shape (T, S) (or (T, S, k) for a
        k-dimensional state).
      b_obs, c_obs: fitted auxiliary parameters, shape (T,) (for k > 1: (T, k), and (T, m) the
        entries of C on the model's basis pairs).
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
        """Posterior mean of the latent state per period from the weighted scoring paths: (T,),
        or (T, k) for a k-dimensional state."""
        w = np.exp(self.log_weights - self.log_weights.max())
        return np.tensordot(self.paths, w / w.sum(), axes=([1], [0]))

    def __repr__(self) -> str:
        flag = "converged" if self.converged else "NOT converged"
        control = f", control_variates={self.control_variates!r}" if self.control_variates else ""
        return (
            f"LoglikResult(value={self.value:.4f}, nse={self.nse:.4f}, ess={self.ess:.1f}/{self.log_weights.shape[0]}"
            f"{control}, {flag} in {self.iterations} iterations)"
        )


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
    check_state_settings(model, settings)
    key = as_key(seed)
    out, diagnostics, extra = eis_entry(model, settings, control)(jax_params(checked), jnp.asarray(y), key)
    value = float(extra["value"])
    if not math.isfinite(value):
        raise FloatingPointError(
            f"the EIS log-likelihood of model '{model.name}' is not finite at params={checked}; "
            "the sampler failed (check the data scale, e.g. returns in percent, and the parameters)"
        )
    facts = control_facts(control, settings.antithetic, out, diagnostics["nse"], extra)
    return LoglikResult(
        value=value,
        nse=float(extra["nse"]) if facts is not None else float(diagnostics["nse"]),
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
        **(facts._asdict() if facts is not None else {}),
    )


def simulate(model, params: Mapping[str, float], n_periods: int, seed=0):
    """Simulate ``n_periods`` observations and the latent path from ``model`` at ``params``.

    Returns:
      ``(y, x)`` as NumPy arrays: observations of shape (T,) or (T, n_series), latent path (T,)
      (or (T, k) for a k-dimensional state).
    """
    model = get_model(model)
    checked = checked_params(model, params)
    n_periods = check_integer("n_periods", n_periods, 1)
    y, x = _simulate_jit(model, jax_params(checked), n_periods, as_key(seed))
    return np.array(y), np.array(x)


@functools.partial(jax.jit, static_argnums=(0, 2))
def _simulate_jit(model, params, n_periods, key):
    return model.simulate(params, n_periods, key)
