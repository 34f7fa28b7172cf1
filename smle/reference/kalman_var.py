"""Kalman filter log-likelihood for a k-dimensional Gaussian VAR(1) state observed with noise.

    y_t = obs_intercept + Z x_t + e_t,   e_t ~ N(0, H)                        (p observations)
    x_t = intercept + Phi x_{t-1} + eta_t,   eta_t ~ N(0, Q),   x_1 ~ N(init_mean, init_cov)

Likelihood by the prediction-error decomposition,
``log L = -1/2 sum_t [p log(2 pi) + log|F_t| + v_t' F_t^{-1} v_t]``, with ``F_t`` handled through
its Cholesky factor (triangular solves, no inverse) and the filtered covariance updated in the
Joseph form ``(I - K Z) P (I - K Z)' + K H K'``, which stays symmetric positive semi-definite.

References: Kalman (1960); Durbin and Koopman, Time Series Analysis by State Space Methods,
2nd ed. (2012), sections 4.3 and 7.2 (recalled from memory); Bucy and Joseph (1968) for the
covariance form.
"""

from __future__ import annotations

from typing import NamedTuple

import jax
import jax.numpy as jnp
from jax.scipy.linalg import solve_triangular

from smle.engine.latent_var import LatentVAR1

LOG_2PI = float(jnp.log(2 * jnp.pi))


class KalmanVAROutput(NamedTuple):
    """Filter output: loglik (scalar); filtered means (T, k) and covariances (T, k, k); per-period
    log-likelihood contributions (T,)."""

    loglik: jax.Array
    filtered_mean: jax.Array
    filtered_cov: jax.Array
    contributions: jax.Array


@jax.jit
def kalman_filter_var(y, state: LatentVAR1, obs_cov, loading=None, obs_intercept=None) -> KalmanVAROutput:
    """Run the filter on observations ``y`` of shape (T, p); ``loading`` Z is (p, k) (default I)."""
    y = jnp.asarray(y, float)
    if y.ndim == 1:
        y = y[:, None]
    n_obs = y.shape[1]
    k = state.intercept.shape[0]
    loading = jnp.eye(n_obs, k) if loading is None else jnp.asarray(loading, float)
    obs_intercept = jnp.zeros((n_obs,)) if obs_intercept is None else jnp.asarray(obs_intercept, float)
    obs_cov = jnp.asarray(obs_cov, float)
    eye = jnp.eye(k)

    def update(mean, cov, obs):
        innovation = obs - obs_intercept - loading @ mean
        innovation_cov = loading @ cov @ loading.T + obs_cov
        root = jnp.linalg.cholesky(0.5 * (innovation_cov + innovation_cov.T))
        scaled = solve_triangular(root, innovation, lower=True)
        # gain K = P Z' F^{-1}, through two triangular solves
        half = solve_triangular(root, loading @ cov, lower=True)
        gain = solve_triangular(root, half, lower=True, trans=1).T
        contribution = -0.5 * (n_obs * LOG_2PI + 2.0 * jnp.sum(jnp.log(jnp.diag(root))) + scaled @ scaled)
        reduce = eye - gain @ loading
        filtered_cov = reduce @ cov @ reduce.T + gain @ obs_cov @ gain.T
        return mean + gain @ innovation, 0.5 * (filtered_cov + filtered_cov.T), contribution

    def step(carry, obs):
        mean, cov, first = carry
        pred_mean = jnp.where(first, state.init_mean, state.intercept + state.transition @ mean)
        pred_cov = jnp.where(first, state.init_cov, state.transition @ cov @ state.transition.T + state.innovation_cov)
        new_mean, new_cov, contribution = update(pred_mean, pred_cov, obs)
        return (new_mean, new_cov, False), (new_mean, new_cov, contribution)

    start = (jnp.zeros((k,)), jnp.zeros((k, k)), True)
    _, (means, covs, contributions) = jax.lax.scan(step, start, y)
    return KalmanVAROutput(jnp.sum(contributions), means, covs, contributions)


def kalman_loglik_var(y, state: LatentVAR1, obs_cov, loading=None, obs_intercept=None) -> jax.Array:
    """The Kalman-filter log-likelihood (see :func:`kalman_filter_var`)."""
    return kalman_filter_var(y, state, obs_cov, loading, obs_intercept).loglik
