"""Efficient importance sampling (EIS) for a latent Gaussian VAR(1) state of dimension k.

The multivariate form of :mod:`smle.engine.eis` (Richard and Zhang 2007, J. Econometrics 141;
design notes section 11). Each period has the auxiliary kernel

    k_t(x_t; x_{t-1}) = p(x_t | x_{t-1}) exp(b_t' x_t - x_t' C_t x_t / 2),

with b_t a vector and C_t a symmetric matrix, whose integral ``chi_t(x_{t-1})`` is the exponential
of a quadratic form in ``x_{t-1}``. The observation part ``(b_obs_t, C_obs_t)`` is fitted by least
squares of ``log g_t`` on the quadratic basis of x_t (1, x_i, x_i x_j), all periods at once; the
``log chi_{t+1}`` part is added exactly by a backward scan, as in the one-dimensional engine.

Which products ``x_i x_j`` enter the basis is a static choice, ``pairs``: all of them by default
((k+1)(k+2)/2 regressors), or the entries where the Hessian of ``log g_t`` can be non-zero (a
diagonal for independent components, a star for one common factor and idiosyncratic terms),
which cuts the regression cost and the number of draws needed. The chi terms always enter in full.

Kernel algebra, per period, with transition ``x | x_prev ~ N(d + F x_prev, L L')`` (for period
1: ``d`` the initial mean, ``F = 0``, ``L`` the Cholesky factor of the initial covariance), in the
standardised coordinate ``z = L^{-1}(x - d - F x_prev)``:

    M = I + L' C L = R R'        (Cholesky; the sampler's precision in z)
    r = b - C d,   u0 = R^{-1} L' r,   U1 = R^{-1} L' C F
    log chi(x_prev) = alpha + beta' x_prev - x_prev' Gamma x_prev / 2,
        alpha = -log|R| + u0'u0/2 + b'd - d'C d/2,   beta = F'r - U1'u0,   Gamma = F'C F - U1'U1
    sampler: x = (d + G u0) + (F - G U1) x_prev + G e,   G = L R'^{-1},   e ~ N(0, I)

Only Cholesky factors and triangular solves are used, never an explicit inverse.

Phase 2 (leverage): an observation density depending on ``(x_{t-1}, x_t)`` adds a cross term
``x_{t-1}' D_t x_t`` to the kernel; in the algebra above it enters as ``C F -> C F - D'`` in U1 and
in the linear terms, and the regression basis becomes the quadratic basis of the stacked pair.
"""

from __future__ import annotations

import functools
from typing import NamedTuple

import jax
import jax.numpy as jnp
from jax.scipy.special import logsumexp

from smle.engine.eis import EISSettings, weight_diagnostics
from smle.engine.implicit import implicit_fixed_point
from smle.engine.latent_var import LatentVAR1
from smle.engine.multi_basis import (
    column_cholesky, pair_index, quadratic_forms, symmetric_from_pairs, check_draws, check_pairs, diagonal_pairs,
    fit_quadratic, full_pairs, star_pairs,
)
from smle.engine.multi_sampler import AuxiliaryMulti, SamplerMulti, assemble, draw_paths, log_weights, mean_path

__all__ = [
    "AuxiliaryMulti",
    "EISMultiInfo",
    "EISMultiOutput",
    "EISSettings",
    "SamplerMulti",
    "assemble",
    "check_draws",
    "check_pairs",
    "diagonal_pairs",
    "draw_paths",
    "eis_loglik_multi",
    "eis_map",
    "fit_auxiliary",
    "fit_quadratic",
    "full_pairs",
    "log_weights",
    "mean_path",
    "newton_start",
    "period_derivatives",
    "standard_normals",
    "star_pairs",
    "weight_diagnostics",
]


class EISMultiInfo(NamedTuple):
    """Diagnostics: iterations, converged, last relative change, per-period R^2 (T,)."""

    iterations: jax.Array
    converged: jax.Array
    last_change: jax.Array
    r_squared: jax.Array


class EISMultiOutput(NamedTuple):
    """Result of :func:`eis_loglik_multi`: value, log weights (S,), scoring paths (T, S, k),
    auxiliary parameters, sampler, diagnostics."""

    value: jax.Array
    log_weights: jax.Array
    paths: jax.Array
    auxiliary: AuxiliaryMulti
    sampler: SamplerMulti
    info: EISMultiInfo


def period_derivatives(log_obs_fn, point: jax.Array):
    """Gradient (T, k) and Hessian (T, k, k) of log g_t at one path (T, k), period by period."""
    k = point.shape[-1]
    grad_fn = jax.grad(lambda v: jnp.sum(log_obs_fn(v[:, None, :])))
    first = grad_fn(point)
    directions = jnp.broadcast_to(jnp.eye(k, dtype=point.dtype)[:, None, :], (k,) + point.shape)
    columns = jax.vmap(lambda e: jax.jvp(grad_fn, (point,), (e,))[1])(directions)
    hessian = jnp.moveaxis(columns, 0, -1)
    return first, 0.5 * (hessian + jnp.swapaxes(hessian, -1, -2))


def newton_start(state: LatentVAR1, log_obs_fn, guess: jax.Array, n_newton: int, pairs) -> AuxiliaryMulti:
    """Auxiliary parameters from a second-order expansion of log g_t about the posterior mode.

    The negative Hessian is restricted to ``pairs`` and shifted by a multiple of the identity
    just enough to be positive semi-definite (so that the kernel is integrable); each step moves
    to the mean path of the assembled Gaussian approximation (Newton's method for the joint mode
    when log g_t is concave).
    """
    k = guess.shape[-1]
    rows, cols = pair_index(pairs)

    def expand(point):
        first, hessian = period_derivatives(log_obs_fn, point)
        curvature = symmetric_from_pairs(-hessian[..., rows, cols], pairs, k)
        # a period whose curvature is not positive definite is shifted by its Gershgorin bound
        # (cheap, and enough for a start: the EIS iterations refit it)
        eye = jnp.eye(k, dtype=point.dtype)
        roots = column_cholesky(curvature + 1e-10 * eye)  # no batched LAPACK call (see column_cholesky)
        definite = jnp.all(jnp.isfinite(roots), axis=(-2, -1))
        off_diagonal = jnp.sum(jnp.abs(curvature), axis=-1) - jnp.abs(jnp.diagonal(curvature, axis1=-2, axis2=-1))
        bound = jnp.min(jnp.diagonal(curvature, axis1=-2, axis2=-1) - off_diagonal, axis=-1)
        shift = jnp.where(definite, 0.0, jnp.maximum(-bound, 0.0) + 1e-10)
        curvature = curvature + shift[:, None, None] * eye
        b_obs = first + jnp.einsum("tij,tj->ti", curvature, point)
        return AuxiliaryMulti(b_obs, curvature[..., rows, cols])

    def step(point, _):
        return mean_path(assemble(state, expand(point), pairs)), None

    point, _ = jax.lax.scan(step, guess, None, length=n_newton)
    return expand(point)


def eis_map(
    state: LatentVAR1, log_obs_fn, normals: jax.Array, auxiliary: AuxiliaryMulti, pairs, antithetic: bool = False
):
    """One EIS iteration: draw with the current sampler, regress the residual of log g_t on the
    basis, add the coefficients to the current ones; returns (new parameters, R^2).

    Regressing the residual from the current quadratic gives the same least-squares solution
    with a rounding error proportional to the residual (zero at an exact Gaussian fit).
    """
    k = auxiliary.b_obs.shape[-1]
    paths = draw_paths(assemble(state, auxiliary, pairs), normals)
    log_obs = log_obs_fn(paths)
    c_matrix = symmetric_from_pairs(auxiliary.c_obs, pairs, k)
    current = jnp.sum(paths * auxiliary.b_obs[:, None, :], axis=-1) - 0.5 * quadratic_forms(paths, c_matrix)
    total_var = jnp.var(log_obs, axis=1)
    db, dc, r_squared = fit_quadratic(paths, log_obs - current, pairs, total_var, antithetic)
    # a period whose regression is not finite keeps its current parameters
    usable = jnp.all(jnp.isfinite(db), axis=1) & jnp.all(jnp.isfinite(dc), axis=1)
    new = AuxiliaryMulti(
        jnp.where(usable[:, None], auxiliary.b_obs + db, auxiliary.b_obs),
        jnp.where(usable[:, None], auxiliary.c_obs + dc, auxiliary.c_obs),
    )
    return new, jnp.where(usable, r_squared, 0.0)


def _eis_map_of_inputs(log_obs_fn, pairs, antithetic, inputs, normals, auxiliary: AuxiliaryMulti):
    """:func:`eis_map` with ``inputs = (state, obs_args)``, the form the implicit fixed point takes."""
    state, obs_args = inputs
    return eis_map(state, functools.partial(log_obs_fn, obs_args), normals, auxiliary, pairs, antithetic)


def fit_auxiliary(
    state: LatentVAR1, log_obs_fn, obs_args, normals: jax.Array, guess: jax.Array, settings: EISSettings, pairs
) -> tuple[AuxiliaryMulti, EISMultiInfo]:
    """The auxiliary parameters (differentiable by implicit differentiation) and diagnostics."""
    bound = functools.partial(log_obs_fn, obs_args)
    # a fixed number of undamped steps here (settings.n_newton is the scalar engine's cap on its
    # line-searched iteration, 200 by default): five, as measured for the k-dimensional start
    start = jax.lax.stop_gradient(newton_start(state, bound, guess, min(settings.n_newton, 5), pairs))
    auxiliary, (r_squared, iterations, change, _) = implicit_fixed_point(
        functools.partial(_eis_map_of_inputs, log_obs_fn, pairs, settings.antithetic), settings, (state, obs_args), normals, start
    )
    info = EISMultiInfo(
        iterations=jax.lax.stop_gradient(iterations).astype(jnp.int32),
        converged=jax.lax.stop_gradient(change) <= settings.tol,
        last_change=jax.lax.stop_gradient(change),
        r_squared=jax.lax.stop_gradient(r_squared),
    )
    return auxiliary, info


def _normals(key, n_periods: int, n_draws: int, k: int, antithetic: bool) -> jax.Array:
    if antithetic:
        half = jax.random.normal(key, (n_periods, n_draws // 2, k))
        return jnp.concatenate([half, -half], axis=1)
    return jax.random.normal(key, (n_periods, n_draws, k))


def standard_normals(key: jax.Array, n_periods: int, k: int, settings: EISSettings):
    """Independent fitting (T, S, k) and scoring (T, S_score, k) common random numbers.

    With antithetic draws the pairs are draws (s, s + S/2).
    """
    fit_key, score_key = jax.random.split(key)
    return (
        _normals(fit_key, n_periods, settings.n_draws, k, settings.antithetic),
        _normals(score_key, n_periods, settings.score_draws, k, settings.antithetic),
    )


def eis_loglik_multi(
    state: LatentVAR1,
    log_obs_fn,
    obs_args,
    guess: jax.Array,
    key: jax.Array,
    settings: EISSettings,
    pairs=None,
) -> EISMultiOutput:
    """EIS estimate of the log-likelihood with a k-dimensional Gaussian VAR(1) state.

    Args:
      state: the latent VAR(1) coefficients (:class:`smle.engine.latent_var.LatentVAR1`).
      log_obs_fn: ``log_obs_fn(obs_args, paths)`` maps paths (T, S, k) to log g_t, shape (T, S);
        a pure function of x_t period by period (a static argument of the gradient).
      obs_args: the pytree (parameters, data) that log g_t depends on.
      guess: a rough path for the posterior mode, shape (T, k), starting the Newton steps.
      key: JAX PRNG key; fitting and scoring draws derive from it.
      settings: static estimator settings (:class:`smle.engine.eis.EISSettings`).
      pairs: static tuple of (i, j), i <= j, the products in the regression basis (default
        :func:`full_pairs`); must cover every entry where the Hessian of log g_t can be non-zero
        for the fit to be exact on a Gaussian log g_t.

    Returns:
      An :class:`EISMultiOutput`; its value is differentiable in ``state`` and ``obs_args``.

    References:
      Richard and Zhang (2007), J. Econometrics 141, 1385-1411.
    """
    n_periods, k = guess.shape
    pairs = check_pairs(full_pairs(k) if pairs is None else pairs, k)
    check_draws(settings.n_draws, k, pairs, settings.antithetic)
    check_draws(settings.score_draws, 0, (), settings.antithetic)
    fit_normals, score_normals = standard_normals(key, n_periods, k, settings)
    auxiliary, info = fit_auxiliary(state, log_obs_fn, obs_args, fit_normals, guess, settings, pairs)
    sampler = assemble(state, auxiliary, pairs)
    paths = draw_paths(sampler, score_normals)
    weights = log_weights(sampler, log_obs_fn(obs_args, paths), paths)
    value = logsumexp(weights) - jnp.log(weights.shape[0])
    return EISMultiOutput(value, weights, paths, auxiliary, sampler, info)
