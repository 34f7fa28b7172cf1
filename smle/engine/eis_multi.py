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
import numpy as np
from jax.scipy.linalg import solve_triangular
from jax.scipy.special import logsumexp

from smle.engine.eis import EISSettings, weight_diagnostics
from smle.engine.fixed_point import _solve_adjoint
from smle.engine.latent_var import LatentVAR1
from smle.errors import SmleInputError

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
    "standard_normals",
    "star_pairs",
    "weight_diagnostics",
]


# ---------------------------------------------------------------------------------------------
# The quadratic basis


def full_pairs(k: int) -> tuple[tuple[int, int], ...]:
    """Every product x_i x_j, i <= j: k(k+1)/2 pairs."""
    return tuple((i, j) for i in range(k) for j in range(i, k))


def diagonal_pairs(k: int) -> tuple[tuple[int, int], ...]:
    """Squares only: for an observation density separable across the components of x_t."""
    return tuple((i, i) for i in range(k))


def star_pairs(k: int, hub: int = 0) -> tuple[tuple[int, int], ...]:
    """Squares and the products of one component (``hub``, a common factor) with every other."""
    cross = tuple((min(hub, j), max(hub, j)) for j in range(k) if j != hub)
    return tuple(sorted(set(diagonal_pairs(k) + cross)))


def _pair_index(pairs):
    rows = np.array([p[0] for p in pairs], dtype=int)
    cols = np.array([p[1] for p in pairs], dtype=int)
    return rows, cols


def _symmetric_from_pairs(values: jax.Array, pairs, k: int) -> jax.Array:
    """(..., m) entries on ``pairs`` -> (..., k, k) symmetric matrices (zero elsewhere)."""
    rows, cols = _pair_index(pairs)
    matrix = jnp.zeros(values.shape[:-1] + (k, k), values.dtype)
    return matrix.at[..., rows, cols].set(values).at[..., cols, rows].set(values)


def check_pairs(pairs, k: int) -> tuple[tuple[int, int], ...]:
    """Return ``pairs`` as a sorted tuple, or raise SmleInputError unless each is (i, j) with
    0 <= i <= j < k and every square (i, i) is present."""
    try:
        cleaned = tuple(sorted({(int(i), int(j)) for i, j in pairs}))
    except (TypeError, ValueError):
        raise SmleInputError(f"pairs must be a sequence of (i, j) index pairs; got {pairs!r}") from None
    bad = [p for p in cleaned if not 0 <= p[0] <= p[1] < k]
    if bad:
        raise SmleInputError(f"pairs {bad} are not (i, j) with 0 <= i <= j < {k}")
    missing = [i for i in range(k) if (i, i) not in cleaned]
    if missing:
        raise SmleInputError(f"pairs must include every square (i, i); missing i = {missing}")
    return cleaned


def check_draws(n_draws: int, k: int, pairs, antithetic: bool) -> None:
    """Raise SmleInputError if the draws cannot identify the regression on the quadratic basis.

    With antithetic pairs the squares and products take only S/2 distinct values per period, so
    S/2 must exceed their number; without them S must exceed the whole basis.
    """
    if antithetic and n_draws % 2:
        raise SmleInputError(f"n_draws={n_draws} must be even with antithetic draws")
    m = len(pairs)
    needed = 2 * (m + 2) if antithetic else k + m + 2
    if n_draws < needed:
        raise SmleInputError(
            f"n_draws={n_draws} is too few for a state of dimension {k} with {m} quadratic terms "
            f"(antithetic={antithetic}); at least {needed} are needed, or choose fewer pairs"
        )


# ---------------------------------------------------------------------------------------------
# Types


class AuxiliaryMulti(NamedTuple):
    """Observation part of the auxiliary parameters: ``log g_t(x) ~ const + b_obs' x - x' C_obs x / 2``.

    Attributes:
      b_obs: shape (T, k).
      c_obs: the entries of C_obs on the basis pairs (i <= j), shape (T, m).
    """

    b_obs: jax.Array
    c_obs: jax.Array


class SamplerMulti(NamedTuple):
    """The assembled sampler and the pieces of the log weight.

    Draw: ``x_t = mean_intercept_t + mean_slope_t x_{t-1} + scale_t e_t``, ``e_t ~ N(0, I_k)``.
    Log weight of a path: ``log_chi_first + sum_t [log g_t(x_t) + weight_const_t
    + weight_linear_t' x_t - x_t' weight_quadratic_t x_t / 2]``.
    Shapes: (T, k), (T, k, k), (T, k, k), (T,), (T, k), (T, k, k), ().
    """

    mean_intercept: jax.Array
    mean_slope: jax.Array
    scale: jax.Array
    weight_const: jax.Array
    weight_linear: jax.Array
    weight_quadratic: jax.Array
    log_chi_first: jax.Array


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


# ---------------------------------------------------------------------------------------------
# Sampler assembly, draws and weights


def _period_coefficients(state: LatentVAR1, n_periods: int):
    """Per period: transition intercept (T, k), slope (T, k, k), Cholesky factor of its covariance."""
    k = state.intercept.shape[0]
    dtype = jnp.result_type(state.transition, float)
    intercept = jnp.broadcast_to(state.intercept, (n_periods, k)).at[0].set(state.init_mean)
    slope = jnp.broadcast_to(state.transition, (n_periods, k, k)).at[0].set(jnp.zeros((k, k), dtype))
    factor = jnp.broadcast_to(jnp.linalg.cholesky(state.innovation_cov), (n_periods, k, k))
    factor = factor.at[0].set(jnp.linalg.cholesky(state.init_cov))
    return intercept, slope, factor


SMALL_DIM = 4
"""Up to this state dimension the per-period algebra inside the time scans is written out
elementwise (unrolled Cholesky and triangular solves, broadcast products): on CPU the library
calls for tiny matrices cost far more per step than the arithmetic."""


SMALL_BASIS = 9
"""Up to this many regressors the per-period normal equations are solved by unrolled code
vectorised over periods (rather than one library call per period)."""


def _quadratic_forms(paths, matrices):
    """``x' A_t x`` for paths (T, S, k) and matrices (T, k, k) -> (T, S)."""
    if paths.shape[-1] <= SMALL_DIM:
        return jnp.sum(paths[..., :, None] * matrices[:, None] * paths[..., None, :], axis=(-2, -1))
    return jnp.einsum("tsi,tij,tsj->ts", paths, matrices, paths)


def _matmul(a, b):
    if a.shape[-1] <= SMALL_DIM and a.ndim == 2:
        if b.ndim == 1:
            return jnp.sum(a * b[None, :], axis=1)
        return jnp.sum(a[:, :, None] * b[None, :, :], axis=1)
    return a @ b


def _cholesky(matrix, small: int = SMALL_DIM):
    """Lower Cholesky factor; NaN where the matrix is not positive definite (as LAPACK's)."""
    k = matrix.shape[-1]
    if k > small:
        return jnp.linalg.cholesky(matrix)
    factor = [[None] * k for _ in range(k)]
    for j in range(k):
        diagonal = matrix[j, j] - sum(factor[j][m] ** 2 for m in range(j))
        factor[j][j] = jnp.sqrt(diagonal)
        for i in range(j + 1, k):
            factor[i][j] = (matrix[i, j] - sum(factor[i][m] * factor[j][m] for m in range(j))) / factor[j][j]
    zero = jnp.zeros((), matrix.dtype)
    return jnp.stack([jnp.stack([factor[i][j] if j <= i else zero for j in range(k)]) for i in range(k)])


def _solve_lower(factor, rhs, transpose: bool = False, small: int = SMALL_DIM):
    """Solve ``factor y = rhs`` (or ``factor' y = rhs``), factor lower triangular; rhs (k,) or (k, n)."""
    k = factor.shape[-1]
    if k > small:
        return solve_triangular(factor, rhs, lower=True, trans=1 if transpose else 0)
    solution = [None] * k
    order = range(k - 1, -1, -1) if transpose else range(k)
    for i in order:
        done = range(i + 1, k) if transpose else range(i)
        coefficient = (lambda m: factor[m, i]) if transpose else (lambda m: factor[i, m])  # noqa: E731
        solution[i] = (rhs[i] - sum(coefficient(m) * solution[m] for m in done)) / factor[i, i]
    return jnp.stack(solution)


def _kernel_step(chi_next, inputs):
    """One backward step: kernel of period t from its observation part and log chi_{t+1}."""
    alpha_next, beta_next, gamma_next = chi_next
    b_obs, c_obs, d, slope, factor = inputs
    k = d.shape[0]
    eye = jnp.eye(k, dtype=d.dtype)
    b = b_obs + beta_next
    curvature = c_obs + gamma_next
    curvature = 0.5 * (curvature + curvature.T)
    precision_z = eye + _matmul(_matmul(factor.T, curvature), factor)
    precision_z = 0.5 * (precision_z + precision_z.T)
    # guard, acting only for a regression that produced a non-integrable kernel: replace the
    # z-precision by its diagonal floored at 0.01 (and use the curvature this implies, so that
    # the weights stay exact for the kernel actually sampled)
    ok = jnp.all(jnp.isfinite(_cholesky(jax.lax.stop_gradient(precision_z))))
    floored = eye + jnp.diag(jnp.maximum(jnp.diag(precision_z) - 1.0, -0.99))
    left = _solve_lower(factor, floored - eye, transpose=True)
    floored_curvature = _solve_lower(factor, left.T, transpose=True)
    curvature = jnp.where(ok, curvature, 0.5 * (floored_curvature + floored_curvature.T))
    root = _cholesky(jnp.where(ok, precision_z, floored))

    r = b - _matmul(curvature, d)
    u0 = _solve_lower(root, _matmul(factor.T, r))
    u1 = _solve_lower(root, _matmul(factor.T, _matmul(curvature, slope)))
    alpha = -jnp.sum(jnp.log(jnp.diag(root))) + 0.5 * jnp.sum(u0 * u0) + jnp.sum(b * d) - 0.5 * jnp.sum(
        d * _matmul(curvature, d)
    )
    beta = _matmul(slope.T, r) - _matmul(u1.T, u0)
    gamma = _matmul(_matmul(slope.T, curvature), slope) - _matmul(u1.T, u1)
    gamma = 0.5 * (gamma + gamma.T)
    scale = _solve_lower(root, factor.T).T
    moments = (d + _matmul(scale, u0), slope - _matmul(scale, u1), scale)
    weight = (alpha_next, beta_next - b, gamma_next - curvature)
    return (alpha, beta, gamma), (moments, weight, alpha)


def assemble(state: LatentVAR1, auxiliary: AuxiliaryMulti, pairs) -> SamplerMulti:
    """Build the sampler from the observation-part auxiliary parameters by a backward scan."""
    n_periods, k = auxiliary.b_obs.shape
    intercept, slope, factor = _period_coefficients(state, n_periods)
    c_obs = _symmetric_from_pairs(auxiliary.c_obs, pairs, k)
    dtype = intercept.dtype
    zero = (jnp.zeros((), dtype), jnp.zeros((k,), dtype), jnp.zeros((k, k), dtype))
    _, (moments, weight, alpha) = jax.lax.scan(
        _kernel_step, zero, (auxiliary.b_obs, c_obs, intercept, slope, factor), reverse=True
    )
    return SamplerMulti(*moments, *weight, alpha[0])


def draw_paths(sampler: SamplerMulti, normals: jax.Array) -> jax.Array:
    """Transform standard normals of shape (T, S, k) into sampler paths of shape (T, S, k)."""

    def step(previous, inputs):
        intercept, slope, scale, e = inputs
        if previous.shape[-1] <= SMALL_DIM:
            # broadcast-and-sum rather than matrix products: for small k one fused elementwise
            # kernel per step is about 15x faster on CPU than two dot calls (measured, k = 2)
            current = intercept + jnp.sum(previous[:, None, :] * slope + e[:, None, :] * scale, axis=-1)
        else:
            current = intercept + previous @ slope.T + e @ scale.T
        return current, current

    start = jnp.zeros(normals.shape[1:], normals.dtype)
    _, paths = jax.lax.scan(step, start, (sampler.mean_intercept, sampler.mean_slope, sampler.scale, normals))
    return paths


def mean_path(sampler: SamplerMulti) -> jax.Array:
    """The sampler's mean path (the mode of its Gaussian path density), shape (T, k)."""
    n_periods, k = sampler.mean_intercept.shape
    return draw_paths(sampler, jnp.zeros((n_periods, 1, k), sampler.scale.dtype))[:, 0]


def log_weights(sampler: SamplerMulti, log_obs: jax.Array, paths: jax.Array) -> jax.Array:
    """Log importance weights (S,) given log g_t at the paths (T, S) and the paths (T, S, k)."""
    quadratic = _quadratic_forms(paths, sampler.weight_quadratic)
    per_period = (
        log_obs
        + sampler.weight_const[:, None]
        + jnp.sum(paths * sampler.weight_linear[:, None, :], axis=-1)
        - 0.5 * quadratic
    )
    return sampler.log_chi_first + jnp.sum(per_period, axis=0)


# ---------------------------------------------------------------------------------------------
# Regressions


def fit_quadratic(paths: jax.Array, targets: jax.Array, pairs, total_var=None):
    """Least squares of ``targets ~ a + b'x - x'Cx/2`` per period across draws, all periods at once.

    Regressors: the draws centred on each period's mean, their products on ``pairs``, each column
    centred and scaled to unit variance (needed for accuracy when the state is far from zero);
    normal equations solved by Cholesky, batched over periods.

    Args:
      paths: (T, S, k). targets: (T, S). pairs: the basis products (i <= j).
      total_var: (T,) variance the R^2 is relative to (default: of ``targets``).

    Returns:
      (b (T, k), c (T, m) entries of C on ``pairs``, r_squared (T,)).
    """
    k = paths.shape[-1]
    rows, cols = _pair_index(pairs)
    centre = jnp.mean(paths, axis=1)
    d = paths - centre[:, None, :]
    design = jnp.concatenate([d, d[..., rows] * d[..., cols]], axis=-1)
    design = design - jnp.mean(design, axis=1, keepdims=True)
    spread = jnp.sqrt(jnp.mean(design * design, axis=1))
    spread = jnp.where(spread > 0.0, spread, 1.0)
    design = design / spread[:, None, :]
    response = targets - jnp.mean(targets, axis=1, keepdims=True)
    n_draws = paths.shape[1]
    if design.shape[-1] <= SMALL_BASIS:
        gram = jnp.mean(design[..., :, None] * design[..., None, :], axis=1)
    else:
        gram = jnp.einsum("tsp,tsq->tpq", design, design) / n_draws
    moment = jnp.mean(design * response[..., None], axis=1)
    # a relative ridge of 1e-12 on a unit diagonal keeps an exactly collinear column finite
    gram = gram + 1e-12 * jnp.eye(gram.shape[-1], dtype=gram.dtype)
    root = jax.vmap(lambda g: _cholesky(g, SMALL_BASIS))(gram)
    half = jax.vmap(lambda f, m: _solve_lower(f, m[:, None], small=SMALL_BASIS))(root, moment)
    standardised = jax.vmap(lambda f, h: _solve_lower(f, h, transpose=True, small=SMALL_BASIS))(root, half)[..., 0]
    coefficients = standardised / spread
    linear, products = coefficients[:, :k], coefficients[:, k:]
    c = jnp.where(jnp.asarray(rows == cols), -2.0 * products, -products)
    b = linear + jnp.einsum("tij,tj->ti", _symmetric_from_pairs(c, pairs, k), centre)
    total = jnp.mean(response * response, axis=1) if total_var is None else total_var
    explained = jnp.sum(half[..., 0] ** 2, axis=-1)
    residual_var = jnp.maximum(jnp.mean(response * response, axis=1) - explained, 0.0)
    safe_total = jnp.where(total > 1e-300, total, 1.0)
    r_squared = jnp.where(total > 1e-300, 1.0 - residual_var / safe_total, 1.0)
    return b, c, jnp.clip(r_squared, 0.0, 1.0)


# ---------------------------------------------------------------------------------------------
# The EIS fixed point


def _period_derivatives(log_obs_fn, point: jax.Array):
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
    rows, cols = _pair_index(pairs)

    def expand(point):
        first, hessian = _period_derivatives(log_obs_fn, point)
        curvature = _symmetric_from_pairs(-hessian[..., rows, cols], pairs, k)
        # a period whose curvature is not positive definite is shifted by its Gershgorin bound
        # (cheap, and enough for a start: the EIS iterations refit it)
        eye = jnp.eye(k, dtype=point.dtype)
        definite = jax.vmap(lambda c: jnp.all(jnp.isfinite(_cholesky(c + 1e-10 * eye))))(curvature)
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


def eis_map(state: LatentVAR1, log_obs_fn, normals: jax.Array, auxiliary: AuxiliaryMulti, pairs):
    """One EIS iteration: draw with the current sampler, regress the residual of log g_t on the
    basis, add the coefficients to the current ones; returns (new parameters, R^2).

    Regressing the residual from the current quadratic gives the same least-squares solution
    with a rounding error proportional to the residual (zero at an exact Gaussian fit).
    """
    k = auxiliary.b_obs.shape[-1]
    paths = draw_paths(assemble(state, auxiliary, pairs), normals)
    log_obs = log_obs_fn(paths)
    c_matrix = _symmetric_from_pairs(auxiliary.c_obs, pairs, k)
    current = jnp.sum(paths * auxiliary.b_obs[:, None, :], axis=-1) - 0.5 * _quadratic_forms(paths, c_matrix)
    total_var = jnp.var(log_obs, axis=1)
    db, dc, r_squared = fit_quadratic(paths, log_obs - current, pairs, total_var)
    # a period whose regression is not finite keeps its current parameters
    usable = jnp.all(jnp.isfinite(db), axis=1) & jnp.all(jnp.isfinite(dc), axis=1)
    new = AuxiliaryMulti(
        jnp.where(usable[:, None], auxiliary.b_obs + db, auxiliary.b_obs),
        jnp.where(usable[:, None], auxiliary.c_obs + dc, auxiliary.c_obs),
    )
    return new, jnp.where(usable, r_squared, 0.0)


def _relative_change(new, old):
    """Largest relative change over every leaf of a pytree of auxiliary parameters."""
    changes = jax.tree.map(lambda n, o: jnp.max(jnp.abs(n - o) / (1.0 + jnp.abs(o))), new, old)
    return jnp.max(jnp.stack(jax.tree.leaves(changes)))


def _iterate_to_fixed_point(update, start, extra_template, tol, max_iter: int):
    """Iterate ``a <- update(a)`` (returning ``(new, extra)``) until the relative change is below
    tol or max_iter is reached; the last ``extra`` is carried out. Any pytree ``a``."""

    def cond(carry):
        _, _, iteration, change = carry
        return (iteration < max_iter) & (change > tol)

    def body(carry):
        current, _, iteration, _ = carry
        new, extra = update(current)
        return new, extra, iteration + 1, _relative_change(new, current)

    inf = jnp.asarray(jnp.inf, extra_template.dtype)
    return jax.lax.while_loop(cond, body, (start, extra_template, jnp.asarray(0), inf))


@functools.partial(jax.custom_vjp, nondiff_argnums=(0, 1, 2))
def _fixed_point(log_obs_fn, settings: EISSettings, pairs, inputs, normals, start: AuxiliaryMulti):
    """The EIS fixed point with diagnostics; ``inputs = (state, obs_args)`` are differentiated by
    the implicit function theorem, as in :mod:`smle.engine.eis`."""
    state, obs_args = inputs

    def update(a):
        return eis_map(state, functools.partial(log_obs_fn, obs_args), normals, a, pairs)

    template = jnp.zeros(start.b_obs.shape[:1], start.b_obs.dtype)
    fixed, r_squared, iterations, change = _iterate_to_fixed_point(
        update, start, template, settings.tol, settings.max_iter
    )
    return fixed, (r_squared, iterations.astype(r_squared.dtype), change)


def _fixed_point_forward(log_obs_fn, settings, pairs, inputs, normals, start):
    out = _fixed_point(log_obs_fn, settings, pairs, inputs, normals, start)
    return out, (inputs, normals, start, out[0])


def _fixed_point_backward(log_obs_fn, settings, pairs, residuals, cotangents):
    inputs, normals, start, fixed = residuals

    def eis_step(inputs_, a):
        state, obs_args = inputs_
        return eis_map(state, functools.partial(log_obs_fn, obs_args), normals, a, pairs)[0]

    _, vjp = jax.vjp(eis_step, inputs, fixed)
    adjoint = _solve_adjoint(lambda w: vjp(w)[1], cotangents[0], settings.tangent_tol, settings.max_tangent_iter)
    inputs_cotangent, _ = vjp(adjoint)
    return inputs_cotangent, jnp.zeros_like(normals), jax.tree.map(jnp.zeros_like, start)


_fixed_point.defvjp(_fixed_point_forward, _fixed_point_backward)


def fit_auxiliary(
    state: LatentVAR1, log_obs_fn, obs_args, normals: jax.Array, guess: jax.Array, settings: EISSettings, pairs
) -> tuple[AuxiliaryMulti, EISMultiInfo]:
    """The auxiliary parameters (differentiable by implicit differentiation) and diagnostics."""
    bound = functools.partial(log_obs_fn, obs_args)
    start = jax.lax.stop_gradient(newton_start(state, bound, guess, settings.n_newton, pairs))
    auxiliary, (r_squared, iterations, change) = _fixed_point(
        log_obs_fn, settings, pairs, (state, obs_args), normals, start
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
