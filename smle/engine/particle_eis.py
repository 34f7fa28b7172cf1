"""Particle EIS: the EIS sampler's likelihood scored by a sequential pass with resampling.

The EIS fixed point (:mod:`smle.engine.fixed_point`) gives Gaussian conditionals
``q_t(x_t | x_{t-1}) = k_t(x_t; x_{t-1}) / chi_t(x_{t-1})`` whose kernels
``k_t = p(x_t | x_{t-1}) exp(b_t x_t - c_t x_t^2 / 2)`` carry the next period's integrating
constant. A path's importance weight factors over periods,

    w(x) = chi_1 prod_t  g_t(x_t) chi_{t+1}(x_t) / exp(b_t x_t - c_t x_t^2 / 2),   chi_{T+1} = 1,

(:func:`smle.engine.sampler.period_log_weights` is the log of the t-th factor). Scoring whole
paths (:func:`smle.engine.eis.eis_loglik`) multiplies T factors per path, so the variance of the
log weight adds up over T and the weights of long series get a heavy tail. Here the same factors
are the incremental weights of a particle filter whose proposal is the EIS sampler (the twisted
particle filter of Guarniero, Johansen and Lee 2017, JASA 112; particle EIS of Scharth and Kohn
2016, J. Econometrics 190):

    x_t^i ~ q_t( . | x_{t-1}^{a_i}),   w_t^i = exp(period_log_weights_t(x_t^i)),
    L_hat = chi_1 prod_t  sum_i W_{t-1}^i w_t^i,

with ``W`` the normalised weights carried since the last resampling (``1/S`` just after it).
``L_hat`` is unbiased for L (Del Moral 2004, Feynman-Kac Formulae, ch. 7), and the variance of
``log L_hat`` grows like T times the per-period variance over S instead of through a path-weight
tail. Resampling is systematic (Kitagawa 1996), every period or when the effective sample size of
``W`` falls below a fraction of S, from fixed uniforms (common random numbers).

Two single-run NSEs of ``log L_hat`` are computed:

* ``nse_blocks``: the sum over the stretches between resamplings of the delta-method relative
  variance of each stretch's weighted mean, ``(S sum_i W_i^2 - 1) / (S - 1)`` of the weights at its
  end. It treats the stretches as independent, which holds when the sampler's chi_{t+1} carries
  what the future says about x_t (the EIS fixed point is built for that).
* ``nse_genealogy``: the estimator of Lee and Whiteley (2018, Biometrika 105; the adaptive case:
  Du and Guyader 2021, Ann. Appl. Probab. 31) from the Eve indices (the period-1 ancestor of
  every particle), ``1 - (S / (S - 1))^(r + 1) (1 - sum_k D_k^2)`` with ``D_k`` the final weight
  descending from Eve k and r the number of resamplings. It is unbiased for multinomial
  resampling; with the systematic resampling used here its correction factor does not match the
  genealogy's drift, and measured over seeds it was 2-4 times off (the Eves coalesce to a few
  over T = 2000-8000), so :func:`smle.loglik` reports ``nse_blocks`` (sd / NSE 0.86-1.06,
  experiments/results/particle_eis.md) and keeps this one as a diagnostic.

The same scoring serves a k-dimensional VAR(1) state (:func:`particle_eis_loglik_multi`, with the
sampler of :mod:`smle.engine.eis_multi`): particles are k-vectors, moved by the sampler's
conditional ``x_t = m_t + F_t x_{t-1} + G_t e_t`` and weighted by its per-period factors.

Everything is a pure function: ``lax.scan`` over time, arrays over particles, float64.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import jax
import jax.numpy as jnp
from jax.scipy.special import logsumexp

from smle.engine import eis_multi, multi_sampler
from smle.engine.fixed_point import EISInfo, fit_auxiliary
from smle.engine.latent import LatentAR1
from smle.engine.latent_var import LatentVAR1
from smle.engine.multi_basis import check_draws, check_pairs, full_pairs
from smle.engine.sampler import Auxiliary, EISSettings, Sampler, _normals, assemble


RESAMPLE_THRESHOLD = 0.97
"""Default: resample when the ESS of the carried weights is below this fraction of the particles
(1.0: every period). Measured in experiments/results/particle_eis.md: with antithetic pairs,
resampling every period had 3.5x the sd of 0.97 (sv, T = 2000, S = 512), and 0.5 to 0.9 let the
weights of the stretches between resamplings grow a tail that their delta-method NSE misses."""


class ParticleOutput(NamedTuple):
    """Result of :func:`particle_eis_loglik` (JAX arrays).

    Attributes:
      value: ``log L_hat``.
      log_increments: ``log sum_i W_{t-1}^i w_t^i`` per period, shape (T,) (period 1 includes log chi_1).
      nse_blocks, nse_genealogy: the single-run NSEs of ``value`` (see the module docstring).
      resamplings: number of periods after which the particles were resampled.
      mean_ess: mean over periods of the ESS of the incremental weights (out of S).
      distinct_eves: distinct period-1 ancestors among the final particles.
      final_log_weights: normalised log weights of the particles at period T, shape (S,).
      rounding: float64 rounding scale of the log increments, ``eps * (|log chi_1| + sum_t max_i`` of
        the magnitudes of their terms), as :func:`smle.engine.eis.rounding_scale` for paths.
      auxiliary, sampler, info: the EIS fixed point behind the proposal.
    """

    value: jax.Array
    log_increments: jax.Array
    nse_blocks: jax.Array
    nse_genealogy: jax.Array
    resamplings: jax.Array
    mean_ess: jax.Array
    distinct_eves: jax.Array
    final_log_weights: jax.Array
    rounding: jax.Array
    auxiliary: Auxiliary
    sampler: Sampler
    info: EISInfo


def particle_normals(key: jax.Array, n_periods: int, settings: EISSettings, k: int | None = None):
    """``(fit_normals (T, S_fit), particle_normals (T, S), uniforms (T,))`` from ``key``.

    The fitting set is the one :func:`smle.engine.sampler.standard_normals` gives when the scoring
    set has its own size (the default), so that the proposal is the sampler the path estimator
    scores with; the particles' normals and resampling uniforms come from the other key. With a
    k-dimensional state (``k`` given) the normals have a last axis of size k, and the fitting set
    is the one of :func:`smle.engine.eis_multi.standard_normals`.
    """
    fit_key, particle_key = jax.random.split(key)
    normal_key, uniform_key = jax.random.split(particle_key)
    half = settings.score_draws // 2 if settings.antithetic else settings.score_draws
    if k is None:
        fit = _normals(fit_key, 1, n_periods, settings.n_draws, settings.antithetic)[0]
        normals = jax.random.normal(normal_key, (n_periods, half))
    else:
        fit = eis_multi._normals(fit_key, n_periods, settings.n_draws, k, settings.antithetic)
        normals = jax.random.normal(normal_key, (n_periods, half, k))
    return fit, normals, jax.random.uniform(uniform_key, (n_periods,))


def systematic_indices(log_weights: jax.Array, uniform: jax.Array, n_out: int) -> jax.Array:
    """``n_out`` ancestors by systematic resampling (Kitagawa 1996): stratum ``(uniform + j) / n_out``
    takes the first particle whose cumulative normalised weight exceeds it. Shape (n_out,), sorted."""
    cdf = jnp.cumsum(jnp.exp(log_weights - jnp.max(log_weights)))
    points = (uniform + jnp.arange(n_out, dtype=cdf.dtype)) * (cdf[-1] / n_out)
    return jnp.minimum(jnp.searchsorted(cdf, points, side="right"), log_weights.shape[0] - 1).astype(jnp.int32)


def _pair_sums(values: jax.Array, antithetic: bool) -> jax.Array:
    """Per-unit sums: antithetic particles i and i + S/2 (same ancestor, opposite normals) are one unit."""
    if antithetic:
        half = values.shape[0] // 2
        return values[:half] + values[half:]
    return values


def _block_variance(log_w: jax.Array, antithetic: bool) -> jax.Array:
    """``(n sum U^2 - 1) / (n - 1)`` over the n independent units' normalised weights U: the
    delta-method relative variance of a weighted mean of n i.i.d. units."""
    units = _pair_sums(jnp.exp(log_w), antithetic)
    n = units.shape[0]
    return (n * jnp.sum(units**2) - 1.0) / (n - 1)


def _move_scalar(sampler_t, previous, z):
    intercept, slope, sd = sampler_t[:3]
    return intercept + slope * previous + sd * z


def _terms_scalar(sampler_t, current):
    """The constant, linear and quadratic terms of the log weight factor at states (S,)."""
    const, linear, quadratic = sampler_t[3:]
    return const, linear * current, 0.5 * quadratic * current**2


def _move_multi(sampler_t, previous, z):
    intercept, slope, scale = sampler_t[:3]
    return intercept + previous @ slope.T + z @ scale.T


def _terms_multi(sampler_t, current):
    """The same terms at states (S, k): ``const``, ``x' linear``, ``x' Q x / 2``."""
    const, linear, quadratic = sampler_t[3:]
    return const, current @ linear, 0.5 * jnp.sum((current @ quadratic) * current, axis=-1)


def _particle_step(period_log_obs_fn, obs_args, n: int, antithetic: bool, resample_threshold: float,
                   move=_move_scalar, terms=_terms_scalar):
    """The scan step of :func:`particle_eis_loglik`: resample (when due), move, weight, one period.

    carry: (particles, normalised log weights, Eve indices, summed block variance, resamplings);
    inputs: (t, the sampler's six per-period arrays, normals, uniform); outputs: (log mean of the
    incremental weights, their ESS, the rounding magnitude of the terms). ``move`` and ``terms``
    give the sampler's conditional draw and its log weight factor's terms (scalar or k-vector states).
    """
    n_units = n // 2 if antithetic else n
    log_n = math.log(n)
    every_period = resample_threshold >= 1.0

    def step(carry, inputs):
        previous, log_w_previous, eves, block_var, resamplings = carry
        t, sampler_t, z, u = inputs
        ess = jnp.exp(-logsumexp(2.0 * log_w_previous))
        resample = (t > 0) & (True if every_period else ess < resample_threshold * n)

        def resampled(operands):
            previous, log_w_previous, eves = operands
            # with antithetic draws each resampled ancestor starts a pair (z, -z)
            ancestors = systematic_indices(log_w_previous, u, n_units)
            if antithetic:
                ancestors = jnp.concatenate([ancestors, ancestors])
            return (previous[ancestors], jnp.full_like(log_w_previous, -log_n), eves[ancestors],
                    _block_variance(log_w_previous, antithetic))

        def kept(operands):
            return (*operands, jnp.zeros((), log_w_previous.dtype))

        previous, log_w_previous, eves, block_increment = jax.lax.cond(
            resample, resampled, kept, (previous, log_w_previous, eves))
        block_var = block_var + block_increment
        if antithetic:
            z = jnp.concatenate([z, -z])
        current = move(sampler_t, previous, z)
        log_obs = period_log_obs_fn(obs_args, t, current)
        const, linear, quadratic = terms(sampler_t, current)
        log_increment = log_obs + const + linear - quadratic
        magnitude = jnp.max(jnp.abs(log_obs) + jnp.abs(const) + jnp.abs(linear) + jnp.abs(quadratic))
        log_increment = jnp.where(jnp.isnan(log_increment), -jnp.inf, log_increment)
        log_mean = logsumexp(log_w_previous + log_increment)
        log_w = log_w_previous + log_increment - log_mean
        increment_ess = jnp.exp(2.0 * logsumexp(log_increment) - logsumexp(2.0 * log_increment))
        carry = (current, log_w, eves, block_var, resamplings + resample.astype(jnp.int32))
        return carry, (log_mean, increment_ess, jnp.where(jnp.isfinite(magnitude), magnitude, 0.0))

    return step


def _score(step, sampler, scale, normals, uniforms, settings: EISSettings, fixed_point):
    """Run the particle pass with the sampler (the fields of ``Sampler`` or ``SamplerMulti``, its
    conditional scale given as ``scale``) and collect a :class:`ParticleOutput`."""
    n_periods, n, antithetic = normals.shape[0], settings.score_draws, settings.antithetic
    particle_shape = (n,) + normals.shape[2:]  # (S,) or (S, k)
    log_n = math.log(n)
    dtype = sampler.log_chi_first.dtype
    init = (jnp.zeros(particle_shape, dtype), jnp.full((n,), -log_n, dtype), jnp.arange(n, dtype=jnp.int32),
            jnp.zeros((), dtype), jnp.zeros((), jnp.int32))
    per_period = (sampler.mean_intercept, sampler.mean_slope, scale, sampler.weight_const, sampler.weight_linear,
                  sampler.weight_quadratic)
    inputs = (jnp.arange(n_periods), per_period, normals, uniforms)
    (_, log_w, eves, block_var, resamplings), (log_means, increment_ess, magnitudes) = jax.lax.scan(step, init, inputs)
    log_means = log_means.at[0].add(sampler.log_chi_first)
    block_var = block_var + _block_variance(log_w, antithetic)
    eve_mass = jax.ops.segment_sum(jnp.exp(log_w), eves, num_segments=n)
    factor = jnp.exp((resamplings + 1) * (log_n - math.log(n - 1)))
    genealogy_var = 1.0 - factor * (1.0 - jnp.sum(eve_mass**2))
    auxiliary, info = fixed_point
    return ParticleOutput(
        value=jnp.sum(log_means),
        log_increments=log_means,
        nse_blocks=jnp.sqrt(jnp.maximum(block_var, 0.0)),
        nse_genealogy=jnp.sqrt(jnp.maximum(genealogy_var, 0.0)),
        resamplings=resamplings,
        mean_ess=jnp.mean(increment_ess),
        distinct_eves=jnp.sum(eve_mass > 0),
        final_log_weights=log_w,
        rounding=jnp.finfo(dtype).eps * (jnp.abs(sampler.log_chi_first) + jnp.sum(magnitudes)),
        auxiliary=auxiliary,
        sampler=sampler,
        info=info,
    )


def particle_eis_loglik(
    state: LatentAR1,
    log_obs_fn,
    period_log_obs_fn,
    obs_args,
    guess: jax.Array,
    key: jax.Array,
    settings: EISSettings,
    resample_threshold: float = RESAMPLE_THRESHOLD,
) -> ParticleOutput:
    """Particle EIS estimate of the log-likelihood (see the module docstring).

    Args:
      state, log_obs_fn, obs_args, guess, settings: as for :func:`smle.engine.eis.eis_loglik`
        (``settings.score_draws`` is the number of particles S).
      period_log_obs_fn: ``period_log_obs_fn(obs_args, t, x)``: log g_t at the states x of shape
        (S,) for period t (traced), shape (S,).
      key: JAX PRNG key (fitting draws, particle normals and resampling uniforms derive from it).
      resample_threshold: resample when the ESS of the carried weights is below this fraction of S
        (static; 1.0 resamples every period).

    References:
      Scharth and Kohn (2016), J. Econometrics 190; Guarniero, Johansen and Lee (2017), JASA 112;
      Lee and Whiteley (2018), Biometrika 105; Kitagawa (1996), J. Comput. Graph. Statist. 5.
    """
    n_periods = guess.shape[0]
    fit_normals, normals, uniforms = particle_normals(key, n_periods, settings)
    auxiliary, info = fit_auxiliary(state, log_obs_fn, obs_args, fit_normals, guess, settings)
    sampler = assemble(state, auxiliary)
    step = _particle_step(period_log_obs_fn, obs_args, settings.score_draws, settings.antithetic, resample_threshold)
    return _score(step, sampler, jax.lax.rsqrt(sampler.precision), normals, uniforms, settings, (auxiliary, info))


def particle_eis_loglik_multi(
    state: LatentVAR1,
    log_obs_fn,
    period_log_obs_fn,
    obs_args,
    guess: jax.Array,
    key: jax.Array,
    settings: EISSettings,
    pairs=None,
    resample_threshold: float = RESAMPLE_THRESHOLD,
) -> ParticleOutput:
    """Particle EIS with a k-dimensional Gaussian VAR(1) state (see the module docstring).

    Args:
      state, log_obs_fn, obs_args, guess, settings, pairs: as for
        :func:`smle.engine.eis_multi.eis_loglik_multi` (``settings.score_draws`` particles).
      period_log_obs_fn: ``period_log_obs_fn(obs_args, t, x)``: log g_t at states x of shape
        (S, k) for period t (traced), shape (S,).
      key, resample_threshold: as for :func:`particle_eis_loglik`.
    """
    n_periods, k = guess.shape
    pairs = check_pairs(full_pairs(k) if pairs is None else pairs, k)
    check_draws(settings.n_draws, k, pairs, settings.antithetic)
    fit_normals, normals, uniforms = particle_normals(key, n_periods, settings, k)
    fixed_point = eis_multi.fit_auxiliary(state, log_obs_fn, obs_args, fit_normals, guess, settings, pairs)
    sampler = multi_sampler.assemble(state, fixed_point[0], pairs)
    step = _particle_step(period_log_obs_fn, obs_args, settings.score_draws, settings.antithetic, resample_threshold,
                          _move_multi, _terms_multi)
    return _score(step, sampler, sampler.scale, normals, uniforms, settings, fixed_point)
