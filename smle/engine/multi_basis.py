"""The quadratic basis of a k-dimensional state and the least-squares fit on it.

Part of the multivariate EIS engine (:mod:`smle.engine.eis_multi`): which products ``x_i x_j``
enter the basis (``pairs``, a static choice), checks of that choice and of the number of draws,
small-matrix algebra written out elementwise for small dimensions (on CPU a library call for a
tiny matrix costs far more than its arithmetic), and the per-period least-squares regression of
``log g_t`` on the basis, all periods at once (Richard and Zhang 2007, J. Econometrics 141).
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np
from jax.scipy.linalg import solve_triangular

from smle.errors import SmleInputError

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


def pair_index(pairs):
    rows = np.array([p[0] for p in pairs], dtype=int)
    cols = np.array([p[1] for p in pairs], dtype=int)
    return rows, cols


def symmetric_from_pairs(values: jax.Array, pairs, k: int) -> jax.Array:
    """(..., m) entries on ``pairs`` -> (..., k, k) symmetric matrices (zero elsewhere)."""
    rows, cols = pair_index(pairs)
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


SMALL_DIM = 4
"""Up to this state dimension the per-period algebra inside the time scans is written out
elementwise (unrolled Cholesky and triangular solves, broadcast products): on CPU the library
calls for tiny matrices cost far more per step than the arithmetic."""


SMALL_BASIS = 9
"""Up to this many regressors the per-period normal equations are solved by unrolled code
vectorised over periods (rather than one library call per period)."""


def quadratic_forms(paths, matrices):
    """``x' A_t x`` for paths (T, S, k) and matrices (T, k, k) -> (T, S)."""
    if paths.shape[-1] <= SMALL_DIM:
        return jnp.sum(paths[..., :, None] * matrices[:, None] * paths[..., None, :], axis=(-2, -1))
    return jnp.einsum("tsi,tij,tsj->ts", paths, matrices, paths)


def small_matmul(a, b):
    if a.shape[-1] <= SMALL_DIM and a.ndim == 2:
        if b.ndim == 1:
            return jnp.sum(a * b[None, :], axis=1)
        return jnp.sum(a[:, :, None] * b[None, :, :], axis=1)
    return a @ b


def small_cholesky(matrix, small: int = SMALL_DIM):
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


def small_solve_lower(factor, rhs, transpose: bool = False, small: int = SMALL_DIM):
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


def column_cholesky(matrix):
    """Lower Cholesky factors of a batch of matrices (..., p, p), column by column with array
    operations over the batch; NaN where a matrix is not positive definite (as LAPACK's).

    Used for the batched systems (one per period) instead of ``jnp.linalg.cholesky``: jaxlib's
    batched LAPACK kernels split a batch over the intra-op thread pool and wait for the pieces, and
    two of them in flight at once (the two regressions of an antithetic EIS iteration) deadlocked
    on a 2-core machine (jaxlib 0.10.2, factor-sv N = 10, T = 2000: every thread waiting).
    """
    p = matrix.shape[-1]
    factor = jnp.zeros_like(matrix)
    for j in range(p):
        column = matrix[..., j:, j] - jnp.sum(factor[..., j:, :j] * factor[..., j : j + 1, :j], axis=-1)
        factor = factor.at[..., j:, j].set(column / jnp.sqrt(column[..., :1]))
    return factor


def column_solve_lower(factor, rhs, transpose: bool = False):
    """Solve ``factor y = rhs`` (or ``factor' y = rhs``) for a batch: factor (..., p, p) lower
    triangular, rhs (..., p, n); row by row with array operations over the batch (see
    :func:`column_cholesky` for why no LAPACK call)."""
    p = factor.shape[-1]
    solution = jnp.zeros_like(rhs)
    for i in range(p - 1, -1, -1) if transpose else range(p):
        if transpose:
            coefficients, done = factor[..., i + 1 :, i], solution[..., i + 1 :, :]
        else:
            coefficients, done = factor[..., i, :i], solution[..., :i, :]
        value = rhs[..., i, :] - jnp.sum(coefficients[..., :, None] * done, axis=-2)
        solution = solution.at[..., i, :].set(value / factor[..., i, i, None])
    return solution


def _least_squares(design, response):
    """Per period, least squares of response (T, n) on the columns of design (T, n, p), no intercept.

    Columns are scaled to unit mean square (needed for accuracy when the state is far from zero)
    and the normal equations solved by Cholesky, batched over periods. Returns the coefficients
    (T, p) and the mean square of the fitted values (T,).
    """
    spread = jnp.sqrt(jnp.mean(design * design, axis=1))
    spread = jnp.where(spread > 0.0, spread, 1.0)
    design = design / spread[:, None, :]
    if design.shape[-1] <= SMALL_BASIS:
        gram = jnp.mean(design[..., :, None] * design[..., None, :], axis=1)
    else:
        gram = jnp.einsum("tsp,tsq->tpq", design, design) / design.shape[1]
    moment = jnp.mean(design * response[..., None], axis=1)
    # a relative ridge of 1e-12 on a unit diagonal keeps an exactly collinear column finite
    gram = gram + 1e-12 * jnp.eye(gram.shape[-1], dtype=gram.dtype)
    if gram.shape[-1] <= SMALL_BASIS:
        root = jax.vmap(lambda g: small_cholesky(g, SMALL_BASIS))(gram)
        half = jax.vmap(lambda f, m: small_solve_lower(f, m[:, None], small=SMALL_BASIS))(root, moment)
        standardised = jax.vmap(lambda f, h: small_solve_lower(f, h, transpose=True, small=SMALL_BASIS))(root, half)
    else:
        root = column_cholesky(gram)
        half = column_solve_lower(root, moment[..., None])
        standardised = column_solve_lower(root, half, transpose=True)
    return standardised[..., 0] / spread, jnp.sum(half[..., 0] ** 2, axis=-1)


def _centred(values):
    return values - jnp.mean(values, axis=1, keepdims=True)


def fit_quadratic(paths: jax.Array, targets: jax.Array, pairs, total_var=None, antithetic: bool = False):
    """Least squares of ``targets ~ a + b'x - x'Cx/2`` per period across draws, all periods at once.

    Regressors: the draws centred on each period's mean and their products on ``pairs``.

    With ``antithetic`` the draws are pairs (s, s + S/2) of paths mirrored about the mean path
    (the sampler is affine in the normals), so the centred linear columns are odd and the
    products even across a pair: the least-squares problem splits exactly into the pair
    differences on the linear columns and the pair means on the centred products (an intercept),
    each over S/2 pairs; two small systems instead of one large one.

    Args:
      paths: (T, S, k). targets: (T, S). pairs: the basis products (i <= j).
      total_var: (T,) variance the R^2 is relative to (default: of ``targets``).
      antithetic: whether the draws are antithetic pairs as above.

    Returns:
      (b (T, k), c (T, m) entries of C on ``pairs``, r_squared (T,)).
    """
    k = paths.shape[-1]
    rows, cols = pair_index(pairs)
    centre = jnp.mean(paths, axis=1)
    if antithetic:
        half = paths.shape[1] // 2
        odd = 0.5 * (paths[:, :half] - paths[:, half:])
        odd_target = 0.5 * (targets[:, :half] - targets[:, half:])
        even_target = _centred(0.5 * (targets[:, :half] + targets[:, half:]))
        linear, explained_odd = _least_squares(odd, odd_target)
        products, explained_even = _least_squares(_centred(odd[..., rows] * odd[..., cols]), even_target)
        explained = explained_odd + explained_even
        response_var = jnp.mean(even_target**2 + odd_target**2, axis=1)
    else:
        d = paths - centre[:, None, :]
        response = _centred(targets)
        coefficients, explained = _least_squares(_centred(jnp.concatenate([d, d[..., rows] * d[..., cols]], -1)), response)
        linear, products = coefficients[:, :k], coefficients[:, k:]
        response_var = jnp.mean(response * response, axis=1)
    c = jnp.where(jnp.asarray(rows == cols), -2.0 * products, -products)
    b = linear + jnp.einsum("tij,tj->ti", symmetric_from_pairs(c, pairs, k), centre)
    total = response_var if total_var is None else total_var
    residual_var = jnp.maximum(response_var - explained, 0.0)
    safe_total = jnp.where(total > 1e-300, total, 1.0)
    r_squared = jnp.where(total > 1e-300, 1.0 - residual_var / safe_total, 1.0)
    return b, c, jnp.clip(r_squared, 0.0, 1.0)
