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
      failed_regressions: periods whose last regression was not finite (a collapsed or
        overflowing draw set); they kept their previous parameters.
      step: the damping step of the last iteration (1: undamped EIS).
    """

    iterations: jax.Array
    converged: jax.Array
    last_change: jax.Array
    r_squared: jax.Array
    failed_regressions: jax.Array
    step: jax.Array


# ---------------------------------------------------------------------------------------------
# The EIS fixed point


def _elementwise_derivatives(log_obs_fn, x):
    """First and second derivatives of a separable function of x, elementwise."""
    grad_fn = jax.grad(lambda v: jnp.sum(log_obs_fn(v)))
    first, second = jax.jvp(grad_fn, (x,), (jnp.ones_like(x),))
    return first, second


STEP_FRACTIONS = (1.0, 0.5, 0.25, 0.125, 1.0 / 16, 1.0 / 64, 1.0 / 256, 1.0 / 1024, 0.0)
"""Fractions of the Newton step tried by the line search of :func:`newton_start` (0 keeps the point)."""


NEWTON_TOL = 1e-3
"""The Newton start stops when no period's mode moves by more than this (in units of the state)."""


def log_prior(state: LatentAR1, paths: jax.Array) -> jax.Array:
    """Log density of the latent AR(1) law at paths of shape (T, K), up to a constant; shape (K,)."""
    first = (paths[0] - state.init_mean) ** 2 / state.init_var
    innovations = paths[1:] - state.intercept - state.phi * paths[:-1]
    return -0.5 * (first + jnp.sum(innovations**2, axis=0) / state.sigma_eta**2)


def newton_start(state: LatentAR1, log_obs_fn, guess: jax.Array, n_newton: int) -> Auxiliary:
    """Auxiliary parameters from a second-order expansion of log g_t about the posterior mode.

    Each step expands log g_t about the current path (curvature clipped at zero so that the
    kernel stays integrable), assembles the Gaussian approximation and moves towards its mean
    path. The move is the best of the fractions :data:`STEP_FRACTIONS` of the full step by the
    log posterior ``log p(x) + sum_t log g_t(x_t)`` (0 included, so it never decreases): a full
    Newton step from a point where log g_t is nearly flat (a log variance far above the data's,
    with a persistent or wide state) overshoots by hundreds of units into a region where log g_t
    and its curvature overflow (measured: curvatures of 1e64, a collapsed sampler and a log
    likelihood of -1e64 reported with NSE 0 at sv, phi -0.999, sigma_eta 2.6).
    """
    fractions = jnp.asarray(STEP_FRACTIONS)
    # n_newton caps the steps: near the mode Newton converges in a few; from far away where
    # log g_t is exponential in x (a log variance tens of units from the data's) each step moves
    # about one unit, so a fixed small number of steps would leave the start far from the mode

    def expand(point):
        first, second = _elementwise_derivatives(log_obs_fn, point[:, None])
        c_obs = jnp.maximum(-second[:, 0], 0.0)
        b_obs = first[:, 0] + c_obs * point
        usable = jnp.isfinite(b_obs) & jnp.isfinite(c_obs)
        return Auxiliary(jnp.where(usable, b_obs, 0.0), jnp.where(usable, c_obs, 0.0))

    def step(carry):
        point, iteration, _ = carry
        target = mean_path(assemble(state, expand(point)))
        target = jnp.where(jnp.isfinite(target), target, point)
        trials = point[:, None] + fractions[None, :] * (target - point)[:, None]
        score = log_prior(state, trials) + jnp.sum(log_obs_fn(trials), axis=0)
        score = jnp.where(jnp.isfinite(score), score, -jnp.inf)
        new = trials[:, jnp.argmax(score)]
        return new, iteration + 1, jnp.max(jnp.abs(new - point))

    def keep_going(carry):
        _, iteration, move = carry
        return (iteration < n_newton) & (move > NEWTON_TOL)

    inf = jnp.asarray(jnp.inf, guess.dtype)
    point, _, _ = jax.lax.while_loop(keep_going, step, (guess, jnp.asarray(0), inf))
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
    return new, (jnp.where(usable, r_squared, 0.0), jnp.sum(~usable).astype(jnp.int32))


def _eis_map_of_inputs(log_obs_fn, inputs, normals, auxiliary: Auxiliary):
    """:func:`eis_map` with ``inputs = (state, obs_args)``, the form the implicit fixed point takes."""
    state, obs_args = inputs
    return eis_map(state, functools.partial(log_obs_fn, obs_args), normals, auxiliary)


def fit_auxiliary(
    state: LatentAR1, log_obs_fn, obs_args, normals: jax.Array, guess: jax.Array, settings: EISSettings,
    warm: Auxiliary | None = None,
) -> tuple[Auxiliary, EISInfo]:
    """The EIS auxiliary parameters (differentiable by implicit differentiation) and diagnostics.

    ``log_obs_fn(obs_args, paths)`` gives log g_t at paths of shape (T, S). ``warm``: auxiliary
    parameters to start the iteration from instead of the Newton start (a fit passes those of its
    previous evaluation); a ``warm`` with any non-finite entry (a fit's first evaluation passes
    NaN) falls back to the Newton start. The fixed point and its implicit gradient do not depend on the
    start; the value does only through the tolerance (see :func:`smle.fit.objective`).
    """
    bound = functools.partial(log_obs_fn, obs_args)
    if warm is None:
        start = newton_start(state, bound, guess, settings.n_newton)
    else:
        usable = jnp.all(jnp.isfinite(warm.b_obs)) & jnp.all(jnp.isfinite(warm.c_obs))
        start = jax.lax.cond(usable, lambda: Auxiliary(*warm), lambda: newton_start(state, bound, guess, settings.n_newton))
    start = jax.lax.stop_gradient(start)
    auxiliary, ((r_squared, failed), iterations, change, step) = implicit_fixed_point(
        functools.partial(_eis_map_of_inputs, log_obs_fn), settings, (state, obs_args), normals, start
    )
    info = EISInfo(
        iterations=jax.lax.stop_gradient(iterations).astype(jnp.int32),
        converged=jax.lax.stop_gradient(change) <= settings.tol,
        last_change=jax.lax.stop_gradient(change),
        r_squared=jax.lax.stop_gradient(r_squared),
        failed_regressions=jax.lax.stop_gradient(failed).astype(jnp.int32),
        step=jax.lax.stop_gradient(step),
    )
    return auxiliary, info
