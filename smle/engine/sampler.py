"""The EIS importance sampler: settings, the auxiliary parameters, the assembly of the Gaussian
sampler from them, draws, log weights, the per-period regressions and the common random numbers.

The pieces :mod:`smle.engine.fixed_point` iterates and :mod:`smle.engine.eis` puts together
(Richard and Zhang 2007, J. Econometrics 141).
"""

from __future__ import annotations

from typing import NamedTuple

import jax
import jax.numpy as jnp

from smle.engine import gaussian
from smle.engine.latent import LatentAR1


# ---------------------------------------------------------------------------------------------
# Default settings: the one place they are written. smle.loglik reads DRAWS, SCORE_DRAWS, TOL and
# MAX_ITER; smle.fit, compare and studies the FIT_ ones; the command line writes its --draws
# defaults out and tests/test_cli.py holds them to these. (smle.check keeps its own: both sets of
# n_draws paths, tol 1e-6, so that its NSE-scaling grid varies one number of draws.)
# Measured against the exact grid value in experiments/results/eis_accuracy.md: a small fitting
# set, a few iterations and a large scoring set have an RMSE 2.5x lower at T = 2000 than 64
# draws for both sets iterated to 1e-6, at 1.1-1.35x the CPU time (2x for sv at T = 8000). Importance sampling is unbiased for any sampler and the scoring draws
# are independent of the fitting draws, so a sampler short of the fixed point costs variance
# only, and 3, 5 and 12 iterations gave the same spread.

DRAWS = 32
"""Default paths of the fitting set."""

SCORE_DRAWS = 512
"""Default paths of the scoring set (one pass: cheap next to the fitting iterations)."""

TOL = 1e-2
"""Default tolerance of a likelihood evaluation: EIS iterates until the largest relative change
of the auxiliary parameters is at most this (3-5 iterations for sv and garch-mix at T = 2000),
and ``converged`` says whether it got there within ``MAX_ITER``."""

MAX_ITER = 50
"""Default cap on EIS iterations (reached only where EIS does not settle: then ``converged`` is False)."""

FIT_DRAWS = 64
"""Default paths of each draw set (fitting and scoring) inside a fit. Every evaluation of a fit
carries a gradient, whose reverse pass runs through the scoring set: with 32 fitting and 512
scoring draws an sv fit (T = 2000) took 2.5-3x the time of 64 and 64 (experiments/results/bench_fit.md);
how the estimates' simulation error compares was not measured, so fits keep 64."""

FIT_TOL = 1e-8
"""Default tolerance of the EIS fixed point inside a fit. The fit's gradient is the implicit
gradient at the fixed point, which is the gradient of the evaluated function only when the fixed
point is reached: with ``TOL`` the two differ (measured in experiments/results/eis_accuracy.md)."""

FIT_MAX_ITER = 100
"""Default cap on EIS iterations at each evaluation of a fit."""


class EISSettings(NamedTuple):
    """Static settings of the EIS estimator.

    Attributes:
      n_draws: number of simulated paths S (per draw set; even when antithetic).
      antithetic: pair every draw with its negation.
      tol: convergence tolerance on the largest relative change of the auxiliary parameters.
      max_iter: cap on EIS iterations.
      n_newton: cap on the Newton steps towards the posterior mode for the starting sampler
        (they stop earlier once the mode moves by less than 1e-3).
      max_tangent_iter: cap on the fixed-point iterations of the implicit-gradient solve.
      tangent_tol: relative tolerance of the implicit-gradient solve.
      n_score_draws: paths in the scoring set (None: ``n_draws``). Scoring is one pass against
        about a dozen passes of fitting, so a larger scoring set buys accuracy cheaply, and the
        weight-tail tests need one.
    """

    n_draws: int = DRAWS
    antithetic: bool = True
    tol: float = TOL
    max_iter: int = MAX_ITER
    n_newton: int = 200
    max_tangent_iter: int = 200
    tangent_tol: float = 1e-5
    n_score_draws: int | None = None

    @property
    def score_draws(self) -> int:
        """Paths in the scoring set."""
        return self.n_draws if self.n_score_draws is None else self.n_score_draws


class Auxiliary(NamedTuple):
    """Auxiliary EIS parameters for the observation part of each period, shape (T,).

    ``log g_t(x) ~ const + b_obs x - c_obs x^2 / 2`` on the sampler's draws.
    """

    b_obs: jax.Array
    c_obs: jax.Array


class Sampler(NamedTuple):
    """The assembled importance sampler and the pieces of the log weight, each of shape (T,).

    Draw: ``x_t = mean_intercept_t + mean_slope_t x_{t-1} + z_t / sqrt(precision_t)``.
    Log weight of a path: ``log_chi_first + sum_t [log g_t(x_t) + weight_const_t
    + weight_linear_t x_t - weight_quadratic_t x_t^2 / 2]``.
    """

    mean_intercept: jax.Array
    mean_slope: jax.Array
    precision: jax.Array
    weight_const: jax.Array
    weight_linear: jax.Array
    weight_quadratic: jax.Array
    log_chi_first: jax.Array


# ---------------------------------------------------------------------------------------------
# Sampler assembly, draws and weights


def _period_coefficients(state: LatentAR1, n_periods: int):
    """Transition intercept, slope and variance per period; period 1 carries the initial law."""
    dtype = jnp.result_type(state.phi, float)
    ones = jnp.ones((n_periods,), dtype)
    intercept = (ones * state.intercept).at[0].set(state.init_mean)
    slope = (ones * state.phi).at[0].set(0.0)
    variance = (ones * state.sigma_eta**2).at[0].set(state.init_var)
    return intercept, slope, variance


def assemble(state: LatentAR1, auxiliary: Auxiliary) -> Sampler:
    """Build the sampler from the observation-part auxiliary parameters by a backward scan.

    At period t the kernel's quadratic is the observation part plus the exact log chi_{t+1}
    coefficients. The precision of each conditional is kept above 1% of the transition's own
    precision, a guard that only acts for a regression that produced a non-integrable kernel.
    """
    n_periods = auxiliary.b_obs.shape[0]
    intercept, slope, variance = _period_coefficients(state, n_periods)

    def step(chi_next, inputs):
        b_obs, c_obs, d, phi, v = inputs
        b = b_obs + chi_next.beta
        c = jnp.maximum(c_obs + chi_next.gamma, -0.99 / v)
        chi = gaussian.kernel_integral(b, c, d, phi, v)
        moments = gaussian.sampler_moments(b, c, d, phi, v)
        weight = (chi_next.alpha, chi_next.beta - b, chi_next.gamma - c)
        return chi, (moments, weight, chi.alpha)

    zero = jnp.zeros((), intercept.dtype)
    _, (moments, weight, alpha) = jax.lax.scan(
        step,
        gaussian.ChiCoefficients(zero, zero, zero),
        (auxiliary.b_obs, auxiliary.c_obs, intercept, slope, variance),
        reverse=True,
    )
    return Sampler(
        mean_intercept=moments.mean_intercept,
        mean_slope=moments.mean_slope,
        precision=moments.precision,
        weight_const=weight[0],
        weight_linear=weight[1],
        weight_quadratic=weight[2],
        log_chi_first=alpha[0],
    )


def draw_paths(sampler: Sampler, normals: jax.Array) -> jax.Array:
    """Transform standard normal draws of shape (T, S) into sampler paths of shape (T, S)."""
    scale = jax.lax.rsqrt(sampler.precision)

    def step(previous, inputs):
        intercept, slope, sd, z = inputs
        current = intercept + slope * previous + sd * z
        return current, current

    start = jnp.zeros(normals.shape[1:], normals.dtype)
    _, paths = jax.lax.scan(
        step, start, (sampler.mean_intercept, sampler.mean_slope, scale, normals)
    )
    return paths


def mean_path(sampler: Sampler) -> jax.Array:
    """The sampler's mean path, shape (T,): the mode of its Gaussian path density."""
    zeros = jnp.zeros((sampler.precision.shape[0], 1), sampler.precision.dtype)
    return draw_paths(sampler, zeros)[:, 0]


def period_log_weights(sampler: Sampler, log_obs: jax.Array, paths: jax.Array) -> jax.Array:
    """Per-period terms of the log weights, shape (T, S): ``log g_t(x_t)`` minus the sampler's
    Gaussian kernel of period t (the chi_{t+1} integrating constant included), at the paths."""
    return (
        log_obs
        + sampler.weight_const[:, None]
        + sampler.weight_linear[:, None] * paths
        - 0.5 * sampler.weight_quadratic[:, None] * paths**2
    )


def log_weights(sampler: Sampler, log_obs: jax.Array, paths: jax.Array) -> jax.Array:
    """Log importance weights of the paths (shape (S,)) given log g_t at the paths (T, S):
    ``log chi_1 + sum_t`` of :func:`period_log_weights`."""
    return sampler.log_chi_first + jnp.sum(period_log_weights(sampler, log_obs, paths), axis=0)


# ---------------------------------------------------------------------------------------------
# Regressions


def fit_quadratic(paths: jax.Array, targets: jax.Array, total_var=None):
    """Least-squares fit of ``targets ~ a + b x - c x^2/2`` per period across draws.

    The regressors are centred on each period's draw mean (centring is needed for accuracy in
    float64 when the state's level is far from zero); the normal equations are formed from
    moments that XLA computes in one fused pass over the draws, then mapped back to the raw
    coefficients. Arrays of shape (T, S); returns (b, c, r_squared), each of shape (T,), where
    R^2 is relative to ``total_var`` if given (the variance of the quantity whose regression this
    is an update of), else to the variance of ``targets``.
    """
    centre = jnp.mean(paths, axis=1)
    d = paths - centre[:, None]
    d2 = d * d
    m1, m2, m3, m4 = (jnp.mean(v, axis=1) for v in (d, d2, d2 * d, d2 * d2))
    y0, y1, y2 = (jnp.mean(v, axis=1) for v in (targets, d * targets, d2 * targets))
    yy = jnp.mean(targets * targets, axis=1)
    s_dd = m2 - m1 * m1
    s_de = m3 - m1 * m2
    s_ee = m4 - m2 * m2
    s_dy = y1 - m1 * y0
    s_ey = y2 - m2 * y0
    det = s_dd * s_ee - s_de * s_de
    slope = (s_ee * s_dy - s_de * s_ey) / det
    curvature = (s_dd * s_ey - s_de * s_dy) / det
    b = slope - 2.0 * curvature * centre
    c = -2.0 * curvature
    residual_var = jnp.maximum(yy - y0 * y0 - slope * s_dy - curvature * s_ey, 0.0)
    total = yy - y0 * y0 if total_var is None else total_var
    r_squared = jnp.where(total > 1e-300, 1.0 - residual_var / jnp.where(total > 1e-300, total, 1.0), 1.0)
    return b, c, jnp.clip(r_squared, 0.0, 1.0)


def _normals(key: jax.Array, n_sets: int, n_periods: int, n_draws: int, antithetic: bool) -> jax.Array:
    if antithetic:
        half = jax.random.normal(key, (n_sets, n_periods, n_draws // 2))
        return jnp.concatenate([half, -half], axis=2)
    return jax.random.normal(key, (n_sets, n_periods, n_draws))


def standard_normals(key: jax.Array, n_periods: int, settings: EISSettings):
    """Two independent sets of common random numbers (fitting, scoring), of shapes (T, S) and
    (T, S_score).

    With antithetic draws the pairs are columns (s, s + S/2). With a scoring set of its own size
    the two sets come from two keys split from ``key``.
    """
    if settings.score_draws == settings.n_draws:
        both = _normals(key, 2, n_periods, settings.n_draws, settings.antithetic)
        return both[0], both[1]
    fit_key, score_key = jax.random.split(key)
    return (
        _normals(fit_key, 1, n_periods, settings.n_draws, settings.antithetic)[0],
        _normals(score_key, 1, n_periods, settings.score_draws, settings.antithetic)[0],
    )


def pair_units(values: jax.Array, antithetic: bool) -> jax.Array:
    """The independent units of a per-draw quantity (leading axis S): antithetic pair means."""
    if antithetic:
        half = values.shape[0] // 2
        return 0.5 * (values[:half] + values[half:])
    return values
