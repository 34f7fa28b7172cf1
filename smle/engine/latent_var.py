"""A stationary Gaussian VAR(1) latent state of dimension k.

    x_1 ~ N(init_mean, init_cov)
    x_t = intercept + transition x_{t-1} + eta_t,   eta_t ~ N(0, innovation_cov),   t = 2..T

Stationary start: ``init_mean = (I - transition)^{-1} intercept`` and ``init_cov`` the solution
of the discrete Lyapunov equation ``Sigma = transition Sigma transition' + innovation_cov``
(Hamilton 1994, Time Series Analysis, section 10.2: the vec solution
``vec(Sigma) = (I - Phi kron Phi)^{-1} vec(Q)``; for larger k the doubling algorithm of
Anderson and Moore 1979, Optimal Filtering, section 6.7 (recalled from memory)). Both are
differentiable JAX code.

The one-dimensional :class:`smle.engine.latent.LatentAR1` is the case k = 1
(:func:`from_ar1`).
"""

from __future__ import annotations

from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine.latent import LatentAR1
from smle.errors import SmleInputError, describe

KRONECKER_MAX_DIM = 12
"""Largest k solved by the (k^2 x k^2) vec linear system; beyond it, doubling."""

DOUBLING_STEPS = 40
"""Doubling steps: the truncation error is of order rho^(2^steps), rho the spectral radius."""


class LatentVAR1(NamedTuple):
    """Coefficients of a Gaussian VAR(1) state of dimension k (JAX arrays).

    Attributes:
      intercept: constant of the transition mean, shape (k,).
      transition: autoregressive matrix Phi, shape (k, k).
      innovation_cov: covariance Q of the innovations, shape (k, k).
      init_mean: mean of x_1, shape (k,).
      init_cov: covariance of x_1, shape (k, k).
    """

    intercept: jax.Array
    transition: jax.Array
    innovation_cov: jax.Array
    init_mean: jax.Array
    init_cov: jax.Array

    @property
    def dim(self) -> int:
        """State dimension k."""
        return self.intercept.shape[-1]


def lyapunov(transition, innovation_cov, method: str | None = None) -> jax.Array:
    """Solve ``Sigma = Phi Sigma Phi' + Q`` (Phi stable) for the symmetric Sigma, differentiably.

    Args:
      transition: Phi, shape (k, k), spectral radius below one.
      innovation_cov: Q, shape (k, k), symmetric.
      method: "kronecker" (vec linear solve, exact to rounding), "doubling"
        (``Sigma <- Sigma + A Sigma A'``, ``A <- A^2``), or None (kronecker for k <= 12).
    """
    transition = jnp.asarray(transition, float)
    innovation_cov = jnp.asarray(innovation_cov, float)
    k = transition.shape[0]
    if method is None:
        method = "kronecker" if k <= KRONECKER_MAX_DIM else "doubling"
    if method == "kronecker":
        system = jnp.eye(k * k, dtype=transition.dtype) - jnp.kron(transition, transition)
        # row-major vec: vec(A X B') = (A kron B) vec(X)
        solution = jnp.linalg.solve(system, innovation_cov.reshape(-1)).reshape(k, k)
    elif method == "doubling":

        def step(carry, _):
            power, total = carry
            return (power @ power, total + power @ total @ power.T), None

        (_, solution), _ = jax.lax.scan(step, (transition, innovation_cov), None, length=DOUBLING_STEPS)
    else:
        raise SmleInputError(f"method={describe(method)} is not accepted; use 'kronecker', 'doubling' or None")
    return 0.5 * (solution + solution.T)


def from_intercept(intercept, transition, innovation_cov) -> LatentVAR1:
    """VAR(1) ``x_t = intercept + Phi x_{t-1} + eta_t`` started from its stationary law."""
    intercept = jnp.asarray(intercept, float)
    transition = jnp.asarray(transition, float)
    innovation_cov = jnp.asarray(innovation_cov, float)
    k = intercept.shape[0]
    init_mean = jnp.linalg.solve(jnp.eye(k, dtype=transition.dtype) - transition, intercept)
    return LatentVAR1(intercept, transition, innovation_cov, init_mean, lyapunov(transition, innovation_cov))


def stationary(mean, transition, innovation_cov) -> LatentVAR1:
    """VAR(1) with mean ``mean``: ``x_t - mean = Phi (x_{t-1} - mean) + eta_t``, stationary start."""
    mean = jnp.asarray(mean, float)
    transition = jnp.asarray(transition, float)
    innovation_cov = jnp.asarray(innovation_cov, float)
    intercept = mean - transition @ mean
    return LatentVAR1(intercept, transition, innovation_cov, mean, lyapunov(transition, innovation_cov))


def independent_ar1(mean, phi, sigma_eta) -> LatentVAR1:
    """k independent stationary AR(1) components: diagonal Phi = diag(phi), Q = diag(sigma_eta^2).

    The stationary covariance is written in closed form, ``diag(sigma_eta^2 / (1 - phi^2))``.
    """
    mean, phi, sigma_eta = (jnp.atleast_1d(jnp.asarray(v, float)) for v in (mean, phi, sigma_eta))
    mean, phi, sigma_eta = jnp.broadcast_arrays(mean, phi, sigma_eta)
    return LatentVAR1(
        intercept=mean * (1.0 - phi),
        transition=jnp.diag(phi),
        innovation_cov=jnp.diag(sigma_eta**2),
        init_mean=mean,
        init_cov=jnp.diag(sigma_eta**2 / (1.0 - phi**2)),
    )


def from_ar1(state: LatentAR1) -> LatentVAR1:
    """The one-dimensional AR(1) state as a VAR(1) with k = 1 (same start law)."""
    as_vector = lambda v: jnp.reshape(jnp.asarray(v, float), (1,))  # noqa: E731
    as_matrix = lambda v: jnp.reshape(jnp.asarray(v, float), (1, 1))  # noqa: E731
    return LatentVAR1(
        as_vector(state.intercept),
        as_matrix(state.phi),
        as_matrix(jnp.asarray(state.sigma_eta, float) ** 2),
        as_vector(state.init_mean),
        as_matrix(state.init_var),
    )


# ---------------------------------------------------------------------------------------------
# Validation (concrete values, outside JIT)


def check_stationary(transition, name: str = "transition") -> np.ndarray:
    """Return Phi as a float array, or raise SmleInputError unless it is square, finite and stable."""
    matrix = np.asarray(transition, dtype=float)
    if matrix.ndim != 2 or matrix.shape[0] != matrix.shape[1]:
        raise SmleInputError(f"{name} must be a square (k, k) matrix; got shape {matrix.shape}")
    if not np.all(np.isfinite(matrix)):
        raise SmleInputError(f"{name} must be finite; got {describe(matrix.tolist())}")
    radius = float(np.max(np.abs(np.linalg.eigvals(matrix))))
    if radius >= 1.0:
        raise SmleInputError(
            f"{name} has spectral radius {radius:.6g}; a stationary VAR(1) state needs every "
            "eigenvalue of the transition inside the unit circle (radius < 1)"
        )
    return matrix


def check_covariance(cov, name: str = "innovation_cov", dim: int | None = None) -> np.ndarray:
    """Return a covariance as a float array, or raise SmleInputError unless symmetric positive definite."""
    matrix = np.asarray(cov, dtype=float)
    if matrix.ndim != 2 or matrix.shape[0] != matrix.shape[1] or (dim is not None and matrix.shape[0] != dim):
        wanted = f"({dim}, {dim})" if dim is not None else "(k, k)"
        raise SmleInputError(f"{name} must be a square {wanted} matrix; got shape {matrix.shape}")
    if not np.all(np.isfinite(matrix)):
        raise SmleInputError(f"{name} must be finite; got {describe(matrix.tolist())}")
    scale = max(1.0, float(np.max(np.abs(matrix))))
    if not np.allclose(matrix, matrix.T, rtol=0.0, atol=1e-12 * scale):
        raise SmleInputError(f"{name} must be symmetric; got {describe(matrix.tolist())}")
    smallest = float(np.min(np.linalg.eigvalsh(matrix)))
    if smallest <= 0.0:
        raise SmleInputError(
            f"{name} is not positive definite (smallest eigenvalue {smallest:.6g}); a covariance "
            "matrix must be symmetric with all eigenvalues > 0"
        )
    return matrix


def check_state(state: LatentVAR1) -> LatentVAR1:
    """Validate a whole state (shapes, stability, covariances); return it unchanged."""
    transition = check_stationary(state.transition, "transition")
    k = transition.shape[0]
    for name in ("intercept", "init_mean"):
        vector = np.asarray(getattr(state, name), dtype=float)
        if vector.shape != (k,) or not np.all(np.isfinite(vector)):
            raise SmleInputError(f"{name} must be a finite vector of shape ({k},); got {describe(vector.tolist())}")
    check_covariance(state.innovation_cov, "innovation_cov", k)
    check_covariance(state.init_cov, "init_cov", k)
    return state


# ---------------------------------------------------------------------------------------------
# Simulation


def sample_path(state: LatentVAR1, key: jax.Array, n_periods: int) -> jax.Array:
    """One path x_1..x_T from the state's own law, shape (T, k)."""
    noise = jax.random.normal(key, (n_periods, state.intercept.shape[0]), dtype=jnp.result_type(float))
    init_factor = jnp.linalg.cholesky(state.init_cov)
    innovation_factor = jnp.linalg.cholesky(state.innovation_cov)
    first = state.init_mean + init_factor @ noise[0]

    def step(previous, eta):
        current = state.intercept + state.transition @ previous + innovation_factor @ eta
        return current, current

    _, rest = jax.lax.scan(step, first, noise[1:])
    return jnp.concatenate([first[None], rest])
