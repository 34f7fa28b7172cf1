"""Efficient importance sampling (EIS) for models with a latent Gaussian AR(1) state.

The likelihood ``L = integral prod_t g_t(y_t | x_t) p(x_t | x_{t-1}) dx`` is estimated by
importance sampling from a sequence of Gaussian kernels

    k_t(x_t; x_{t-1}) = p(x_t | x_{t-1}) exp(b_t x_t - c_t x_t^2 / 2),

whose parameters are chosen by backward least-squares regressions of ``log g_t`` on
``(1, x_t, -x_t^2/2)`` across the simulated paths (Richard and Zhang 2007, J. Econometrics 141).
Because ``log chi_{t+1}(x_t)`` is exactly quadratic in ``x_t``, regressing ``log g_t + log chi_{t+1}``
equals regressing ``log g_t`` alone and adding the chi coefficients; so all T regressions are done
at once, vectorised, and a scalar backward scan adds the chi terms (see :mod:`smle.engine.gaussian`).

The random numbers are common: the sampler transforms fixed standard normal draws, so the
estimate is a smooth function of the parameters. The regressions use one set of draws (the
fitting set) and the estimate is scored on a second, independent set (scoring on the fitting
draws biases log L low by about one Monte Carlo standard deviation).

The auxiliary parameters are the fixed point ``a* = Phi(a*, theta)`` of one EIS iteration. The
fixed point is found by iteration to a tolerance, and it is differentiated by the implicit
function theorem (a custom VJP solving the adjoint equation by fixed-point iteration), so the gradient of the returned log-likelihood is the
exact gradient of the function that is evaluated: auxiliary parameters re-fitted at every theta
with the same random numbers.

Everything here is a pure function over explicit pytrees, JIT-compatible, with ``lax.scan`` over
time and vectorised over draws.
"""
from __future__ import annotations

from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
from jax.scipy.special import logsumexp

from smle.engine.fixed_point import EISInfo, eis_map, fit_auxiliary, newton_start  # noqa: F401 (engine API)
from smle.engine.latent import LatentAR1
from smle.engine.sampler import (  # noqa: F401 (engine API: eis.<name> is how callers reach these)
    Auxiliary, EISSettings, Sampler, assemble, draw_paths, fit_quadratic, log_weights, mean_path, pair_units,
    period_log_weights, standard_normals,
)


class EISOutput(NamedTuple):
    """Result of :func:`eis_loglik` (all JAX arrays).

    Attributes:
      value: log-likelihood estimate ``logsumexp(log_weights) - log S`` on the scoring draws.
      log_weights: log importance weights of the scoring paths, shape (S,).
      paths: the scoring paths, shape (T, S).
      auxiliary: fitted auxiliary parameters.
      sampler: the assembled sampler.
      info: convergence diagnostics.
      rounding: float64 rounding scale of the log weights, ``eps * sum_t max_s`` of the magnitudes of
        the terms that cancel in them: large when the data are far from zero against a tiny noise
        scale (price levels with a noise sd of 1e-4), where the cancellation alone moves log L.
    """

    value: jax.Array
    log_weights: jax.Array
    paths: jax.Array
    auxiliary: Auxiliary
    sampler: Sampler
    info: EISInfo
    rounding: jax.Array


def eis_loglik(
    state: LatentAR1,
    log_obs_fn,
    obs_args,
    guess: jax.Array,
    key: jax.Array,
    settings: EISSettings,
    warm: Auxiliary | None = None,
) -> EISOutput:
    """EIS estimate of the log-likelihood.

    Args:
      state: the latent AR(1) coefficients implied by the parameters.
      log_obs_fn: ``log_obs_fn(obs_args, paths)`` maps paths of shape (T, S) to log g_t at
        those paths, shape (T, S); a pure function (it is a static argument of the gradient).
      obs_args: the pytree (parameters, data) that log g_t depends on.
      guess: a rough path for the posterior mode, shape (T,), starting the Newton steps.
      key: JAX PRNG key; the fitting and scoring draws are derived from it.
      settings: static estimator settings.
      warm: optional auxiliary parameters to start the EIS iteration from (see
        :func:`smle.engine.fixed_point.fit_auxiliary`).

    Returns:
      An :class:`EISOutput`.

    References:
      Richard and Zhang (2007), J. Econometrics 141, 1385-1411.
    """
    n_periods = guess.shape[0]
    fit_normals, score_normals = standard_normals(key, n_periods, settings)
    auxiliary, info = fit_auxiliary(state, log_obs_fn, obs_args, fit_normals, guess, settings, warm)
    sampler = assemble(state, auxiliary)
    paths = draw_paths(sampler, score_normals)
    log_obs = log_obs_fn(obs_args, paths)
    weights = log_weights(sampler, log_obs, paths)
    value = logsumexp(weights) - jnp.log(weights.shape[0])
    return EISOutput(value, weights, paths, auxiliary, sampler, info, rounding_scale(sampler, log_obs, paths))


def rounding_scale(sampler: Sampler, log_obs: jax.Array, paths: jax.Array) -> jax.Array:
    """``eps * (|log chi_1| + sum_t max_s |terms of period t|)``: how far float64 rounding alone can
    move a log weight (see :class:`EISOutput`); stop-gradient, a diagnostic."""
    magnitude = (
        jnp.abs(log_obs)
        + jnp.abs(sampler.weight_const)[:, None]
        + jnp.abs(sampler.weight_linear[:, None] * paths)
        + jnp.abs(0.5 * sampler.weight_quadratic[:, None] * paths**2)
    )
    total = jnp.abs(sampler.log_chi_first) + jnp.sum(jnp.max(magnitude, axis=1))
    return jax.lax.stop_gradient(jnp.finfo(paths.dtype).eps * total)


N_BATCHES = 8
"""Batches of the scoring set for the between-batch NSE (antithetic pairs kept together)."""


def weight_diagnostics(log_weights: jax.Array, antithetic: bool) -> dict[str, Any]:
    """NSEs of log L_hat and the effective sample size from one run's log weights.

    With antithetic pairs the pair means are the independent units u_i (n of them).

    * ``nse_delta``: the delta method, ``sd(u) / (sqrt(n) mean(u))``. It is at most about 1 by
      construction (one dominant unit gives exactly 1), and with heavy-tailed weights the sample
      variance misses the tail, so it understates the error exactly when the error is large.
    * ``nse_lognormal``: the same with the weights' variance taken from the spread of the log
      units, ``sqrt(expm1(var(log u)) / n)``, the delta method for log-normal weights. The log
      weights' spread is well estimated from a sample that misses the weights' tail, so this
      does not saturate: a log-weight sd of 5 says that no S of practical size is enough.
    * ``nse_batches``: the spread of log mean w over :data:`N_BATCHES` batches of the units,
      ``sd(log m_r) / sqrt(R)``.
    * ``log_weight_sd``: ``sd(log u)``.
    """
    normalised = jnp.exp(log_weights - jnp.max(log_weights))
    units = pair_units(normalised, antithetic)
    n_units = units.shape[0]
    mean = jnp.mean(units)
    nse_delta = jnp.std(units, ddof=1) / jnp.sqrt(n_units) / mean
    log_units = jnp.log(jnp.maximum(units, jnp.finfo(units.dtype).tiny))
    log_sd = jnp.std(log_units, ddof=1)
    nse_lognormal = jnp.sqrt(jnp.expm1(jnp.minimum(log_sd**2, 700.0)) / n_units)
    n_batches = max(min(N_BATCHES, n_units // 2), 2)
    per_batch = max(n_units // n_batches, 1)
    batch_means = jnp.log(jnp.maximum(
        jnp.mean(units[: n_batches * per_batch].reshape(n_batches, per_batch), axis=1), jnp.finfo(units.dtype).tiny
    ))
    nse_batches = jnp.std(batch_means, ddof=1) / jnp.sqrt(n_batches)
    ess = jnp.sum(normalised) ** 2 / jnp.sum(normalised**2)
    return {"nse": nse_delta, "nse_delta": nse_delta, "nse_lognormal": nse_lognormal, "nse_batches": nse_batches,
            "log_weight_sd": log_sd, "ess": ess}
