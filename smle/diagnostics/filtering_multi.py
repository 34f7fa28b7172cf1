"""The guided particle filter for a k-dimensional Gaussian VAR(1) state (k > 1), and the smoothed
factor per component: the ``particles`` route of :func:`smle.filter_factor` for ``sv-2factor``,
``factor-sv``, ``var1-noise`` and any model with ``state_dim > 1``.

The filter is the one of :mod:`smle.diagnostics.filtering` in k dimensions. The state follows
``x_t | x_{t-1} ~ N(c + Phi x_{t-1}, Q)`` with ``x_1 ~ N(m_1, P_1)`` (the stationary law,
:meth:`~smle.models.base.Model.latent_var`). Each period has a Gaussian kernel
``exp(b_t' x - x' C_t x / 2)`` built from ``y_t`` alone: a second-order expansion of
``log g_t(y_t | x)`` about the mode of ``log g_t(y_t | x) + log N(x; m_1, P_1)`` (Newton steps in
the standardised coordinate ``z = L_1^{-1}(x - m_1)``, each bounded by two prior standard
deviations), with ``C_t`` the negative Hessian projected on the positive semi-definite matrices
(eigenvalues floored at ``MIN_CURVATURE``). With the prior of a particle ``N(m, L L')``
(``m = c + Phi x_{t-1}``, ``L`` the Cholesky factor of ``Q``, or of ``P_1`` at t = 1) the proposal
is the kernel times the prior, in closed form through Cholesky factors only:

    R R' = I + L' C_t L,   B = R^{-1} L',   u = B (b_t - C_t m),   x = m + B' (u + e),  e ~ N(0, I)
    log chi_t(m) = b_t' m - m' C_t m / 2 - log|R| + u'u / 2

(``chi_t`` the integral of prior times kernel) and the incremental weights, the one-step
predictive density, the weights, systematic resampling and the PITs are those of the
one-dimensional filter (see :mod:`smle.diagnostics.filtering`; Pitt and Shephard 1999, JASA 94;
Kitagawa 1996, J. Comput. Graph. Statist. 5). For a linear Gaussian model (``var1-noise``) the
kernel is ``log g_t`` itself, so the proposal is the exact conditional law of ``x_t`` given
``x_{t-1}`` and ``y_t`` (the fully adapted case).

The smoothed factor per component is not a particle quantity here: it comes from EIS at the same
parameters (:func:`smoothed_by_eis`), the importance-weighted means and 5%/95% quantiles of
``SMOOTHING_PATHS`` scoring paths of the EIS sampler, a Gaussian approximation of the smoothing
law corrected by its weights (Richard and Zhang 2007, J. Econometrics 141). Backward simulation
from the particles would cost O(N^2) transition densities per period; one EIS run costs about as
much as the filter.
"""

from __future__ import annotations

import functools
import math
from typing import Callable, Mapping

import jax
import jax.numpy as jnp
import numpy as np
from jax.scipy.linalg import solve_triangular

from smle.engine.eis_multi import period_derivatives
from smle.engine.multi_basis import SMALL_DIM
from smle.engine.posterior import path_quantiles, weighted_quantiles
from smle.likelihood import loglik
from smle.diagnostics.particles import (
    MIN_CURVATURE, NEWTON_STEPS, QUANTILES, FilterOutput, has_obs_cdf, systematic_ancestors,
)

SMOOTHING_PATHS = 2000
"""EIS scoring paths behind the smoothed factor of :func:`smoothed_by_eis`."""


def _psd(matrices, floor: float):
    """Symmetric matrices (..., k, k) with their eigenvalues floored at ``floor``."""
    values, vectors = jnp.linalg.eigh(0.5 * (matrices + jnp.swapaxes(matrices, -1, -2)))
    return (vectors * jnp.maximum(values, floor)[..., None, :]) @ jnp.swapaxes(vectors, -1, -2)


def proposal_kernels_multi(model, params: Mapping, data, n_steps: int = NEWTON_STEPS,
                           min_curvature: float = MIN_CURVATURE):
    """Per-period Gaussian kernels ``(b_t, C_t)``, shapes (T, k) and (T, k, k), from y_t alone
    (see the module docstring)."""
    state = model.latent_var(params)
    k = state.dim
    root = jnp.linalg.cholesky(state.init_cov)
    eye = jnp.eye(k, dtype=root.dtype)

    def log_obs(x):  # (T, 1, k) -> (T, 1): each period's term depends on its own x only
        return model.log_obs_density(params, data, x)

    def newton(z, _):
        x = state.init_mean + z @ root.T
        first, hessian = period_derivatives(log_obs, x)
        curvature = _psd(-hessian, 0.0)
        gradient = first @ root - z  # d/dz of log g(m + L z) - |z|^2 / 2
        precision = eye + root.T @ curvature @ root
        step = jnp.linalg.solve(precision, gradient[..., None])[..., 0]
        return z + jnp.clip(step, -2.0, 2.0), None

    guess = jnp.asarray(model.mode_guess(params, data), float)
    start = solve_triangular(root, (guess - state.init_mean).T, lower=True).T
    z, _ = jax.lax.scan(newton, start, None, length=n_steps)
    mode = state.init_mean + z @ root.T
    first, hessian = period_derivatives(log_obs, mode)
    curvature = _psd(-hessian, min_curvature)
    return first + jnp.einsum("tij,tj->ti", curvature, mode), curvature


def _times(rows, matrix):
    """``rows @ matrix'`` for rows (N, k): written out elementwise for small k, where the library
    call for a tiny matrix inside the time scan costs far more than the arithmetic (measured: the
    k = 2 filter ran 50x slower with library products and solves)."""
    if matrix.shape[-1] <= SMALL_DIM:
        return jnp.sum(rows[:, None, :] * matrix[None, :, :], axis=-1)
    return rows @ matrix.T


def proposal_factors(roots, c):
    """Per period ``B_t = R_t^{-1} L_t'`` (T, k, k) and ``log|R_t|`` (T,), with ``R_t R_t' = I + L_t' C_t L_t``
    and ``L_t`` the Cholesky factor of the prior covariance (``roots``, (T, k, k)): computed for all
    periods at once, before the time scan, which then needs no factorisation or solve (factor-sv with
    N = 10, k = 11, T = 2000: 42 s with them inside the scan, 9.7 s without; experiments/
    bench_filter_multi.py on a loaded machine). The proposal's scale
    ``L_t R_t'^{-1}`` is ``B_t'``."""
    k = c.shape[-1]
    precision = jnp.eye(k, dtype=c.dtype) + jnp.swapaxes(roots, -1, -2) @ c @ roots
    precision_root = jnp.linalg.cholesky(0.5 * (precision + jnp.swapaxes(precision, -1, -2)))
    scale = solve_triangular(precision_root, jnp.swapaxes(roots, -1, -2), lower=True)
    return scale, jnp.sum(jnp.log(jnp.diagonal(precision_root, axis1=-2, axis2=-1)), axis=-1)


def _proposal(mean, b_t, c_t, scale_t, log_det_t, eta):
    """Draws of the proposal, ``log chi_t`` at each prior mean and the kernel at the draws.

    ``mean`` (N, k): the particles' prior means; ``scale_t``, ``log_det_t``: :func:`proposal_factors`.
    """
    u = _times(b_t - _times(mean, c_t), scale_t)
    log_chi = mean @ b_t - 0.5 * jnp.sum(mean * _times(mean, c_t), axis=-1) - log_det_t + 0.5 * jnp.sum(u * u, axis=-1)
    current = mean + _times(u + eta, scale_t.T)
    log_kernel = current @ b_t - 0.5 * jnp.sum(current * _times(current, c_t), axis=-1)
    return current, log_chi, log_kernel


def _weighted_summary(current, weights):
    """Mean, standard deviation (k,) and 5%/95% quantiles (2, k) of weighted particles (N, k)."""
    mean = weights @ current
    sd = jnp.sqrt(weights @ (current - mean) ** 2)
    quantiles = jax.vmap(weighted_quantiles, in_axes=(1, None, None), out_axes=1)(current, weights, QUANTILES)
    return mean, sd, quantiles


def guided_filter_multi(model, params: Mapping, y, key, n_particles: int, resample_threshold=0.5):
    """Pure JAX guided particle filter in k dimensions; returns a
    :class:`~smle.diagnostics.particles.FilterOutput` whose per-period state summaries carry a
    trailing component axis (filtered_mean (T, k), filtered_quantiles (2, T, k))."""
    data = model.prepare(params, y)
    state = model.latent_var(params)
    b, c = proposal_kernels_multi(model, params, data)
    n_periods, k = b.shape
    roots = jnp.broadcast_to(jnp.linalg.cholesky(state.innovation_cov), (n_periods, k, k))
    roots = roots.at[0].set(jnp.linalg.cholesky(state.init_cov))
    scale, log_det = proposal_factors(roots, c)
    with_cdf, n_series = has_obs_cdf(model), model.n_series
    keys = jax.random.split(key, (n_periods, 2))
    log_n = math.log(n_particles)

    def step(carry, inputs):
        previous, log_w_previous = carry
        t, b_t, c_t, root, scale_t, log_det_t, period_keys = inputs
        mean = jnp.where(t == 0, state.init_mean[None, :], state.intercept + _times(previous, state.transition))
        eta = jax.random.normal(period_keys[0], (n_particles, k), dtype=mean.dtype)
        current, log_chi, log_kernel = _proposal(mean, b_t, c_t, scale_t, log_det_t, eta)
        period = model.period_data(data, t)
        log_joint = log_w_previous + log_chi - log_kernel + model.log_obs_density(params, period, current[None])[0]
        log_predictive = jax.scipy.special.logsumexp(log_joint)
        log_w = log_joint - log_predictive
        weights = jnp.exp(log_w)
        if with_cdf:  # the predictive mixture itself: particles moved by the transition, no ratio
            cdf = model.obs_cdf(params, period, (mean + _times(eta, root))[None])[0].reshape(n_particles, n_series)
            pit = jnp.exp(log_w_previous) @ cdf
        else:
            pit = jnp.zeros((n_series,), dtype=log_w.dtype)
        summary = _weighted_summary(current, weights)
        ess = 1.0 / jnp.sum(weights**2)
        resample = ess < resample_threshold * n_particles
        ancestors = systematic_ancestors(log_w, jax.random.uniform(period_keys[1], dtype=log_w.dtype))
        particles = jnp.where(resample, current[ancestors], current)
        log_w = jnp.where(resample, jnp.full_like(log_w, -log_n), log_w)
        return (particles, log_w), (*summary, log_predictive, pit, ess, resample)

    init = (jnp.zeros((n_particles, k)), jnp.full((n_particles,), -log_n))
    _, (mean, sd, quantiles, log_predictive, pit, ess, resampled) = jax.lax.scan(
        step, init, (jnp.arange(n_periods), b, c, roots, scale, log_det, keys))
    return FilterOutput(mean, sd, jnp.moveaxis(quantiles, 0, 1), log_predictive, pit, ess, resampled)


@functools.lru_cache(maxsize=None)
def compiled_filter_multi(model, n_particles: int) -> Callable:
    """``(params, y, key, resample_threshold) -> FilterOutput``, compiled once per data shape."""

    def run(params, y, key, resample_threshold):
        return guided_filter_multi(model, params, y, key, n_particles, resample_threshold)

    return jax.jit(run)


def smoothed_by_eis(model, params: Mapping, y, seed: int, n_paths: int = SMOOTHING_PATHS) -> dict:
    """The smoothed factor per component from one EIS run at ``params`` (checked natural values):
    ``smoothed_mean``, ``smoothed_sd``, ``smoothed_lower``, ``smoothed_upper``, each (T, k), the
    importance-weighted moments and 5%/95% quantiles of ``n_paths`` scoring paths (EIS defaults
    otherwise: 64 fitting draws, antithetic). ``seed``: a non-negative integer or a JAX PRNG key."""
    lik = loglik(model, params, y, n_draws=64, seed=seed, n_score_draws=max(n_paths, 64), method="eis",
                 scoring="paths")
    weights = np.exp(lik.log_weights - lik.log_weights.max())
    weights = weights / weights.sum()
    paths = np.asarray(lik.paths)  # (T, S, k)
    mean = np.tensordot(paths, weights, axes=([1], [0]))
    sd = np.sqrt(np.maximum(np.tensordot(paths**2, weights, axes=([1], [0])) - mean**2, 0.0))
    bands = np.stack([np.asarray(path_quantiles(paths[..., j], weights, QUANTILES)) for j in range(paths.shape[-1])],
                     axis=-1)
    return dict(smoothed_mean=mean, smoothed_sd=sd, smoothed_lower=bands[0], smoothed_upper=bands[1])
