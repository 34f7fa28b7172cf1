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

import functools
from typing import Any, NamedTuple

import jax
import jax.numpy as jnp
from jax.scipy.special import logsumexp

from smle.engine import gaussian
from smle.engine.latent import LatentAR1


class EISSettings(NamedTuple):
    """Static settings of the EIS estimator.

    Attributes:
      n_draws: number of simulated paths S (per draw set; even when antithetic).
      antithetic: pair every draw with its negation.
      tol: convergence tolerance on the largest relative change of the auxiliary parameters.
      max_iter: cap on EIS iterations.
      n_newton: Newton steps towards the posterior mode for the starting sampler.
      max_tangent_iter: cap on the fixed-point iterations of the implicit-gradient solve.
      tangent_tol: relative tolerance of the implicit-gradient solve.
      n_score_draws: paths in the scoring set (None: ``n_draws``). Scoring is one pass against
        about a dozen passes of fitting, so a larger scoring set buys accuracy cheaply, and the
        weight-tail tests need one.
    """

    n_draws: int = 64
    antithetic: bool = True
    tol: float = 1e-6
    max_iter: int = 50
    n_newton: int = 5
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


class EISOutput(NamedTuple):
    """Result of :func:`eis_loglik` (all JAX arrays).

    Attributes:
      value: log-likelihood estimate ``logsumexp(log_weights) - log S`` on the scoring draws.
      log_weights: log importance weights of the scoring paths, shape (S,).
      paths: the scoring paths, shape (T, S).
      auxiliary: fitted auxiliary parameters.
      sampler: the assembled sampler.
      info: convergence diagnostics.
    """

    value: jax.Array
    log_weights: jax.Array
    paths: jax.Array
    auxiliary: Auxiliary
    sampler: Sampler
    info: EISInfo


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


def log_weights(sampler: Sampler, log_obs: jax.Array, paths: jax.Array) -> jax.Array:
    """Log importance weights of the paths (shape (S,)) given log g_t at the paths (T, S)."""
    per_period = (
        log_obs
        + sampler.weight_const[:, None]
        + sampler.weight_linear[:, None] * paths
        - 0.5 * sampler.weight_quadratic[:, None] * paths**2
    )
    return sampler.log_chi_first + jnp.sum(per_period, axis=0)


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


def _relative_change(new: Auxiliary, old: Auxiliary):
    return jnp.maximum(
        jnp.max(jnp.abs(new.b_obs - old.b_obs) / (1.0 + jnp.abs(old.b_obs))),
        jnp.max(jnp.abs(new.c_obs - old.c_obs) / (1.0 + jnp.abs(old.c_obs))),
    )


def _iterate_to_fixed_point(update, start: Auxiliary, tol, max_iter: int):
    """Iterate ``a <- update(a)`` until the relative change is below tol or max_iter is reached.

    ``update`` returns ``(new, extra)``; the last ``extra`` (the regressions' R^2) is carried out.
    """

    def cond(carry):
        _, _, iteration, change = carry
        return (iteration < max_iter) & (change > tol)

    def body(carry):
        current, _, iteration, _ = carry
        new, extra = update(current)
        return new, extra, iteration + 1, _relative_change(new, current)

    inf = jnp.asarray(jnp.inf, start.b_obs.dtype)
    extra = jnp.zeros_like(start.b_obs)
    return jax.lax.while_loop(cond, body, (start, extra, jnp.asarray(0), inf))


def _solve_adjoint(transposed_map, cotangent, tol, max_iter: int):
    """Solve ``w = cotangent + A^T w`` by fixed-point iteration, A the EIS map's Jacobian in a.

    Converges when the EIS map is a contraction at its fixed point (spectral radius of A below
    one), the same condition under which the forward iteration converges.
    """

    def cond(carry):
        _, iteration, change = carry
        return (iteration < max_iter) & (change > tol)

    def body(carry):
        w, iteration, _ = carry
        new = jax.tree.map(jnp.add, cotangent, transposed_map(w))
        leaves_new, leaves_old = jax.tree.leaves(new), jax.tree.leaves(w)
        size = jnp.max(jnp.stack([jnp.max(jnp.abs(n)) for n in leaves_new]))
        change = jnp.max(jnp.stack([jnp.max(jnp.abs(n - o)) for n, o in zip(leaves_new, leaves_old)])) / (
            1e-300 + size
        )
        return new, iteration + 1, change

    inf = jnp.asarray(jnp.inf, jax.tree.leaves(cotangent)[0].dtype)
    w, _, change = jax.lax.while_loop(cond, body, (cotangent, jnp.asarray(0), inf))
    finite = jnp.all(jnp.stack([jnp.all(jnp.isfinite(leaf)) for leaf in jax.tree.leaves(w)]))

    def krylov(_):
        # the iteration diverged (a numerical spectral radius of A at or above one, seen for an
        # ill-conditioned exact case): solve (I - A^T) w = cotangent by restarted GMRES instead
        def operator(v):
            return jax.tree.map(jnp.subtract, v, transposed_map(v))

        solution, _ = jax.scipy.sparse.linalg.gmres(
            operator, cotangent, x0=cotangent, tol=tol, atol=0.0, restart=20, maxiter=max(1, max_iter // 20),
            solve_method="batched",
        )
        return solution

    return jax.lax.cond(finite & (change <= tol), lambda _: w, krylov, None)


@functools.partial(jax.custom_vjp, nondiff_argnums=(0, 1))
def _fixed_point(log_obs_fn, settings: EISSettings, inputs, normals, start: Auxiliary):
    """The EIS fixed point a* = Phi(a*; inputs) with diagnostics (R^2, iterations, change).

    ``inputs = (state, obs_args)`` are the differentiable quantities: the latent AR(1)
    coefficients and whatever ``log_obs_fn(obs_args, paths)`` depends on. The custom VJP applies
    the implicit function theorem: d a*/d inputs = (I - A)^{-1} d Phi/d inputs.
    """
    state, obs_args = inputs

    def update(a):
        return eis_map(state, functools.partial(log_obs_fn, obs_args), normals, a)

    fixed, r_squared, iterations, change = _iterate_to_fixed_point(update, start, settings.tol, settings.max_iter)
    return fixed, (r_squared, iterations.astype(r_squared.dtype), change)


def _fixed_point_forward(log_obs_fn, settings, inputs, normals, start):
    out = _fixed_point(log_obs_fn, settings, inputs, normals, start)
    return out, (inputs, normals, start, out[0])


def _fixed_point_backward(log_obs_fn, settings, residuals, cotangents):
    inputs, normals, start, fixed = residuals
    fixed_cotangent = cotangents[0]

    def eis_step(inputs_, a):
        state, obs_args = inputs_
        return eis_map(state, functools.partial(log_obs_fn, obs_args), normals, a)[0]

    _, vjp = jax.vjp(eis_step, inputs, fixed)
    adjoint = _solve_adjoint(lambda w: vjp(w)[1], fixed_cotangent, settings.tangent_tol, settings.max_tangent_iter)
    inputs_cotangent, _ = vjp(adjoint)
    return inputs_cotangent, jnp.zeros_like(normals), jax.tree.map(jnp.zeros_like, start)


_fixed_point.defvjp(_fixed_point_forward, _fixed_point_backward)


def fit_auxiliary(
    state: LatentAR1, log_obs_fn, obs_args, normals: jax.Array, guess: jax.Array, settings: EISSettings
) -> tuple[Auxiliary, EISInfo]:
    """The EIS auxiliary parameters (differentiable by implicit differentiation) and diagnostics.

    ``log_obs_fn(obs_args, paths)`` gives log g_t at paths of shape (T, S).
    """
    bound = functools.partial(log_obs_fn, obs_args)
    start = jax.lax.stop_gradient(newton_start(state, bound, guess, settings.n_newton))
    auxiliary, (r_squared, iterations, change) = _fixed_point(
        log_obs_fn, settings, (state, obs_args), normals, start
    )
    info = EISInfo(
        iterations=jax.lax.stop_gradient(iterations).astype(jnp.int32),
        converged=jax.lax.stop_gradient(change) <= settings.tol,
        last_change=jax.lax.stop_gradient(change),
        r_squared=jax.lax.stop_gradient(r_squared),
    )
    return auxiliary, info


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


def eis_loglik(
    state: LatentAR1,
    log_obs_fn,
    obs_args,
    guess: jax.Array,
    key: jax.Array,
    settings: EISSettings,
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

    Returns:
      An :class:`EISOutput`.

    References:
      Richard and Zhang (2007), J. Econometrics 141, 1385-1411.
    """
    n_periods = guess.shape[0]
    fit_normals, score_normals = standard_normals(key, n_periods, settings)
    auxiliary, info = fit_auxiliary(state, log_obs_fn, obs_args, fit_normals, guess, settings)
    sampler = assemble(state, auxiliary)
    paths = draw_paths(sampler, score_normals)
    weights = log_weights(sampler, log_obs_fn(obs_args, paths), paths)
    value = logsumexp(weights) - jnp.log(weights.shape[0])
    return EISOutput(value, weights, paths, auxiliary, sampler, info)


def weight_diagnostics(log_weights: jax.Array, antithetic: bool) -> dict[str, Any]:
    """NSE of log L_hat (delta method) and effective sample size from one run's log weights.

    With antithetic pairs the pair means are the independent units. The delta method gives
    ``Var(log mean w) ~ Var(mean w) / mean(w)^2``.
    """
    normalised = jnp.exp(log_weights - jnp.max(log_weights))
    if antithetic:
        half = normalised.shape[0] // 2
        units = 0.5 * (normalised[:half] + normalised[half:])
    else:
        units = normalised
    mean = jnp.mean(units)
    nse = jnp.std(units, ddof=1) / jnp.sqrt(units.shape[0]) / mean
    ess = jnp.sum(normalised) ** 2 / jnp.sum(normalised**2)
    return {"nse": nse, "ess": ess}


# ---------------------------------------------------------------------------------------------
# Control variates


def pair_units(values: jax.Array, antithetic: bool) -> jax.Array:
    """The independent units of a per-draw quantity (leading axis S): antithetic pair means."""
    if antithetic:
        half = values.shape[0] // 2
        return 0.5 * (values[:half] + values[half:])
    return values


HERMITE_ORDERS = {True: (2, 4), False: (1, 2, 3, 4)}
"""Orders of the pooled Hermite statistics used as draw control variates (odd orders vanish in
antithetic pair means, so only even ones are kept with antithetic draws)."""


def draw_statistics(normals: jax.Array, antithetic: bool) -> jax.Array:
    """Pooled Hermite statistics of the scoring normals, shape (S, k), each of exact mean zero.

    ``H_k = sum_t He_k(z_t) / sqrt(T k!)`` with the probabilists' Hermite polynomials
    ``He_1 = z, He_2 = z^2 - 1, He_3 = z^3 - 3z, He_4 = z^4 - 6z^2 + 3``: orthonormal under the
    standard normal law, so every statistic has mean 0 and variance 1.
    """
    z = normals
    z2 = z * z
    polynomials = {1: (z, 1.0), 2: (z2 - 1.0, 2.0), 3: (z2 * z - 3.0 * z, 6.0), 4: (z2 * z2 - 6.0 * z2 + 3.0, 24.0)}
    n_periods = z.shape[0]
    columns = []
    for order in HERMITE_ORDERS[antithetic]:
        values, factorial = polynomials[order]
        columns.append(jnp.sum(values, axis=0) / jnp.sqrt(n_periods * factorial))
    return jnp.stack(columns, axis=1)


def log_weight_coefficients(log_weights: jax.Array, regressors: jax.Array, antithetic: bool) -> jax.Array:
    """Control-variate coefficients: least squares of the log weights on the controls, shape (k,).

    ``regressors`` (S, k) are per-draw control quantities on the log scale (a control case's log
    weights, or statistics of the normals). With antithetic draws the regression is over pair
    means: their odd parts cancel in the estimate, so only the even parts should set the
    coefficients. To first order the error of ``log mean w`` is the mean of the centred log
    weights, so these are the variance-minimising coefficients; log weights are close to jointly
    normal where the weights themselves are heavy-tailed, which makes the regression stable where
    one on the weights is not (measured: see ``experiments/results/control_variates.md``).
    """
    target = pair_units(log_weights, antithetic)
    design = pair_units(regressors, antithetic)
    target = target - jnp.mean(target)
    design = design - jnp.mean(design, axis=0)
    gram = design.T @ design
    # a tiny ridge keeps the solve finite when a control is constant (the exact Gaussian case,
    # where every weight is equal); it changes nothing measurable otherwise
    ridge = 1e-12 * (jnp.trace(gram) / gram.shape[0]) + 1e-300
    return jnp.linalg.solve(gram + ridge * jnp.eye(gram.shape[0], dtype=gram.dtype), design.T @ target)


def control_variate_correction(
    log_weights: jax.Array,
    value: jax.Array,
    controls: jax.Array,
    errors: jax.Array,
    coefficients: jax.Array,
    antithetic: bool,
):
    """Correct ``value = log mean w`` by control variates and give the corrected NSE.

    Each control j has per-draw values ``controls[:, j]`` (shape (S, k)) on the weight scale
    (``w0_s / L0`` for a control case, a statistic of mean zero for the draws), and its estimate
    on these draws is off its known value by ``errors[j]`` on the log scale. The corrected
    estimate is ``value - coefficients . errors``; its NSE is the delta method applied to the
    units of ``w_s / mean(w) - coefficients . controls_s``. The coefficients depend smoothly on
    the parameters, so the corrected value is differentiable like ``value``.

    Returns ``(corrected_value, corrected_nse)``.

    References: Hammersley and Handscomb (1964), Monte Carlo Methods, ch. 5 (control variates);
    Durbin and Koopman (1997), Biometrika 84 (the delta method for log L).
    """
    units = pair_units(jnp.exp(log_weights - value) - controls @ coefficients, antithetic)
    n_units = units.shape[0]
    nse = jnp.std(units, ddof=1) / jnp.sqrt(n_units)
    return value - jnp.dot(coefficients, errors), nse
