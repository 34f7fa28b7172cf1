"""The EIS fixed point and its implicit gradient.

The auxiliary parameters are the fixed point ``a* = Phi(a*, theta)`` of one EIS iteration
(:func:`eis_map`), started by Newton steps towards the posterior mode. The fixed point is found by
iteration to ``tol`` and differentiated by the implicit function theorem
(:mod:`smle.engine.implicit`, shared with the multivariate engine), so the gradient is the exact
gradient of the function evaluated (auxiliary parameters re-fitted at every theta with the same
random numbers). Richard and Zhang (2007), J. Econometrics 141.
"""

from __future__ import annotations

import functools
from typing import NamedTuple

import jax
import jax.numpy as jnp

from smle.engine.implicit import implicit_fixed_point
from smle.engine.latent import LatentAR1
from smle.engine.sampler import (
    Auxiliary, EISSettings, assemble, draw_paths, fit_quadratic, mean_path,
)


class EISInfo(NamedTuple):
    """Diagnostics of one EIS evaluation.

    Attributes:
      iterations: EIS iterations used after the Newton start.
      converged: whether the last change fell below the tolerance.
      last_change: largest relative change of the auxiliary parameters at the last iteration.
      r_squared: per-period R^2 of the final regressions, shape (T,).
    """

    iterations: jax.Array
    converged: jax.Array
    last_change: jax.Array
    r_squared: jax.Array


# ---------------------------------------------------------------------------------------------
# The EIS fixed point


def _elementwise_derivatives(log_obs_fn, x):
    """First and second derivatives of a separable function of x, elementwise."""
    grad_fn = jax.grad(lambda v: jnp.sum(log_obs_fn(v)))
    first, second = jax.jvp(grad_fn, (x,), (jnp.ones_like(x),))
    return first, second


def newton_start(state: LatentAR1, log_obs_fn, guess: jax.Array, n_newton: int) -> Auxiliary:
    """Auxiliary parameters from a second-order expansion of log g_t about the posterior mode.

    Each step expands log g_t about the current path (curvature clipped at zero so that the
    kernel stays integrable), assembles the Gaussian approximation and moves to its mean path;
    for log-concave g_t this is Newton's method for the joint mode.
    """

    def expand(point):
        first, second = _elementwise_derivatives(log_obs_fn, point[:, None])
        c_obs = jnp.maximum(-second[:, 0], 0.0)
        b_obs = first[:, 0] + c_obs * point
        return Auxiliary(b_obs, c_obs)

    def step(point, _):
        return mean_path(assemble(state, expand(point))), None

    point, _ = jax.lax.scan(step, guess, None, length=n_newton)
    return expand(point)


def eis_map(state: LatentAR1, log_obs_fn, normals: jax.Array, auxiliary: Auxiliary):
    """One EIS iteration: draw with the current sampler, regress, return new parameters and R^2.

    The regression is run on the residual of log g_t from the current quadratic, and its
    coefficients are added to the current ones: the same least-squares solution, but with a
    rounding error proportional to the residual, which vanishes at an exact (Gaussian) fit.
    """
    paths = draw_paths(assemble(state, auxiliary), normals)
    log_obs = log_obs_fn(paths)
    current = auxiliary.b_obs[:, None] * paths - 0.5 * auxiliary.c_obs[:, None] * paths**2
    total_var = jnp.var(log_obs, axis=1)
    db, dc, r_squared = fit_quadratic(paths, log_obs - current, total_var)
    # a period whose regression is not finite (a draw far in a tail where log g overflows)
    # keeps its current parameters; at a fixed point of finite regressions this never acts
    usable = jnp.isfinite(db) & jnp.isfinite(dc)
    new = Auxiliary(
        jnp.where(usable, auxiliary.b_obs + db, auxiliary.b_obs),
        jnp.where(usable, auxiliary.c_obs + dc, auxiliary.c_obs),
    )
    return new, jnp.where(usable, r_squared, 0.0)


def _eis_map_of_inputs(log_obs_fn, inputs, normals, auxiliary: Auxiliary):
    """:func:`eis_map` with ``inputs = (state, obs_args)``, the form the implicit fixed point takes."""
    state, obs_args = inputs
    return eis_map(state, functools.partial(log_obs_fn, obs_args), normals, auxiliary)


def fit_auxiliary(
    state: LatentAR1, log_obs_fn, obs_args, normals: jax.Array, guess: jax.Array, settings: EISSettings
) -> tuple[Auxiliary, EISInfo]:
    """The EIS auxiliary parameters (differentiable by implicit differentiation) and diagnostics.

    ``log_obs_fn(obs_args, paths)`` gives log g_t at paths of shape (T, S).
    """
    bound = functools.partial(log_obs_fn, obs_args)
    start = jax.lax.stop_gradient(newton_start(state, bound, guess, settings.n_newton))
    auxiliary, (r_squared, iterations, change) = implicit_fixed_point(
        functools.partial(_eis_map_of_inputs, log_obs_fn), settings, (state, obs_args), normals, start
    )
    info = EISInfo(
        iterations=jax.lax.stop_gradient(iterations).astype(jnp.int32),
        converged=jax.lax.stop_gradient(change) <= settings.tol,
        last_change=jax.lax.stop_gradient(change),
        r_squared=jax.lax.stop_gradient(r_squared),
    )
    return auxiliary, info
