"""EIS with kernels over two consecutive states: a Gaussian AR(1) state whose transition depends on
the data (leverage, Yu 2005, J. Econometrics 127).

The likelihood is written over the AR(1) chain ``p0`` of the model's ``latent`` coefficients:

    L = integral p0(x_1..x_T) prod_t h_t(x_{t-1}, x_t) dx,
    h_t = g_t(x_t) r_{t-1}(x_{t-1}, x_t),   r_t = p(x_{t+1} | x_t, data_t) / p0(x_{t+1} | x_t),  r_0 = 1,

where ``p(x_{t+1} | x_t, data_t)`` is the model's Gaussian transition given the data (the
``path_transition`` hook: its mean may be any function of x_t). Each period's auxiliary kernel is
``p0(x_t | x_{t-1})`` times the exponential of a quadratic in the pair ``(x_{t-1}, x_t)``, fitted by
least squares of ``log h_t`` on ``(1, x_{t-1}, x_t, x_{t-1}^2, x_{t-1} x_t, x_t^2)`` across the draws
(period 1: on ``(1, x_1, x_1^2)``). The terms in ``x_{t-1}`` alone are folded into period t-1; the
cross term ``-f_t x_{t-1} x_t`` enters the kernel, whose integral over ``x_t`` stays the exponential of
a quadratic in ``x_{t-1}`` (:func:`smle.engine.gaussian.kernel_integral` with ``cross``). So the sampler
is still a forward Gaussian chain ``x_t | x_{t-1}`` assembled by one backward scan
(:func:`smle.engine.sampler.assemble`): the product of ``p0`` and the kernels is a Gaussian path law
with tridiagonal precision, and the scan is its banded factorisation (closed form, no inverse).

Everything else is the one-dimensional engine's: common random numbers, antithetic draws, a separate
scoring set, the fixed point iterated with damping and differentiated by the implicit function
theorem (:mod:`smle.engine.implicit`), the same diagnostics (:class:`smle.engine.fixed_point.EISInfo`).
Richard and Zhang (2007), J. Econometrics 141.
"""

from __future__ import annotations

import functools
from typing import NamedTuple

import jax
import jax.numpy as jnp
from jax.scipy.special import logsumexp

from smle.engine import multi_basis
from smle.engine.eis import rounding_scale
from smle.engine.fixed_point import EISInfo, eis_info, newton_start
from smle.engine.gaussian import log_normal_density
from smle.engine.implicit import implicit_fixed_point
from smle.engine.latent import LatentAR1
from smle.engine.sampler import (
    Auxiliary, EISSettings, Sampler, assemble, draw_paths, fit_quadratic, period_log_weights, standard_normals,
)

PAIR_BASIS = multi_basis.full_pairs(2)
"""The products of the stacked pair (x_{t-1}, x_t) in the regression: both squares and the cross."""


class AuxiliaryPairs(NamedTuple):
    """The fitted quadratic of each period's ``log h_t`` (all shape (T,); entries of period 1 in
    ``x_0`` are zero): ``log h_t ~ const + b_obs x_t - c_obs x_t^2/2 - cross x_{t-1} x_t
    + b_prev x_{t-1} - c_prev x_{t-1}^2/2``."""

    b_obs: jax.Array
    c_obs: jax.Array
    cross: jax.Array
    b_prev: jax.Array
    c_prev: jax.Array


class EISPairsOutput(NamedTuple):
    """Result of :func:`eis_loglik_pairs`, the fields of :class:`smle.engine.eis.EISOutput` (the
    sampler's ``weight_*`` pieces leave out the cross term, ``+cross_t x_{t-1} x_t`` per period)."""

    value: jax.Array
    log_weights: jax.Array
    paths: jax.Array
    auxiliary: AuxiliaryPairs
    sampler: Sampler
    info: EISInfo
    rounding: jax.Array


def log_pair_terms(state: LatentAR1, log_obs_fn, transition_fn, obs_args, paths: jax.Array) -> jax.Array:
    """``log h_t(x_{t-1}, x_t) = log g_t(x_t) + log r_{t-1}(x_{t-1}, x_t)`` at paths (T, S); shape (T, S).

    ``transition_fn(obs_args, x_from)`` gives the law of x_{t+1} given x_t = ``x_from`` (T - 1, S)
    and the data, with ``mean`` (T - 1, S) and ``sd`` (T - 1,) or (T - 1, S).
    """
    law = transition_fn(obs_args, paths[:-1])
    sd = jnp.asarray(law.sd)
    sd = sd[:, None] if sd.ndim == 1 else sd
    log_r = (log_normal_density(paths[1:], law.mean, sd**2)
             - log_normal_density(paths[1:], state.intercept + state.phi * paths[:-1], state.sigma_eta**2))
    return log_obs_fn(obs_args, paths).at[1:].add(log_r)


def _shifted(values: jax.Array) -> jax.Array:
    """``values[t + 1]`` at t, zero at T: period t+1's terms in x_t, folded into period t."""
    return jnp.concatenate([values[1:], jnp.zeros((1,), values.dtype)])


def assemble_pairs(state: LatentAR1, auxiliary: AuxiliaryPairs) -> Sampler:
    """The forward Gaussian chain of the pair kernels: the x_{t-1}-alone terms of period t folded into
    period t-1, the cross terms into the conditional means (:func:`smle.engine.sampler.assemble`)."""
    folded = Auxiliary(auxiliary.b_obs + _shifted(auxiliary.b_prev), auxiliary.c_obs + _shifted(auxiliary.c_prev))
    return assemble(state, folded, auxiliary.cross)


def _cross_terms(auxiliary: AuxiliaryPairs, paths: jax.Array) -> jax.Array:
    """``cross_t x_{t-1} x_t`` for t = 2..T, shape (T - 1, S)."""
    return auxiliary.cross[1:, None] * paths[:-1] * paths[1:]


def pair_log_weights(sampler: Sampler, auxiliary: AuxiliaryPairs, log_h: jax.Array, paths: jax.Array) -> jax.Array:
    """Log importance weights (S,) of paths (T, S) given ``log h_t`` at them (T, S)."""
    per_period = period_log_weights(sampler, log_h, paths)
    return sampler.log_chi_first + jnp.sum(per_period, axis=0) + jnp.sum(_cross_terms(auxiliary, paths), axis=0)


def _current(auxiliary: AuxiliaryPairs, paths: jax.Array) -> jax.Array:
    """The fitted quadratic of each period at the paths, (T, S)."""
    own = auxiliary.b_obs[:, None] * paths - 0.5 * auxiliary.c_obs[:, None] * paths**2
    previous = (auxiliary.b_prev[1:, None] * paths[:-1] - 0.5 * auxiliary.c_prev[1:, None] * paths[:-1] ** 2
                - _cross_terms(auxiliary, paths))
    return own.at[1:].add(previous)


def eis_map(state: LatentAR1, log_h_fn, normals: jax.Array, auxiliary: AuxiliaryPairs, antithetic: bool):
    """One EIS iteration: draw, regress the residual of ``log h_t`` from the current quadratic on the
    pair basis (period 1 on x_1's), add the coefficients; returns ``(new, (R^2, failed))``.

    Regressing the residual gives the same least-squares solution with a rounding error proportional
    to the residual (zero at an exactly quadratic ``log h_t``).
    """
    paths = draw_paths(assemble_pairs(state, auxiliary), normals)
    log_h = log_h_fn(paths)
    residual = log_h - _current(auxiliary, paths)
    total_var = jnp.var(log_h, axis=1)
    b_first, c_first, r2_first = fit_quadratic(paths[:1], residual[:1], total_var[:1])
    pairs = jnp.stack([paths[:-1], paths[1:]], axis=-1)
    b_pair, c_pair, r2_pair = multi_basis.fit_quadratic(pairs, residual[1:], PAIR_BASIS, total_var[1:], antithetic)
    zero = jnp.zeros((1,), paths.dtype)
    step = AuxiliaryPairs(
        b_obs=jnp.concatenate([b_first, b_pair[:, 1]]),
        c_obs=jnp.concatenate([c_first, c_pair[:, 2]]),
        cross=jnp.concatenate([zero, c_pair[:, 1]]),
        b_prev=jnp.concatenate([zero, b_pair[:, 0]]),
        c_prev=jnp.concatenate([zero, c_pair[:, 0]]),
    )
    # a period whose regression is not finite keeps its current parameters
    usable = jnp.all(jnp.stack([jnp.isfinite(leaf) for leaf in step]), axis=0)
    new = AuxiliaryPairs(*(jnp.where(usable, a + d, a) for a, d in zip(auxiliary, step)))
    r_squared = jnp.concatenate([r2_first, r2_pair])
    return new, (jnp.where(usable, r_squared, 0.0), jnp.sum(~usable).astype(jnp.int32))


def _eis_map_of_inputs(log_obs_fn, transition_fn, antithetic, inputs, normals, auxiliary: AuxiliaryPairs):
    """:func:`eis_map` with ``inputs = (state, obs_args)``, the form the implicit fixed point takes."""
    state, obs_args = inputs
    log_h_fn = functools.partial(log_pair_terms, state, log_obs_fn, transition_fn, obs_args)
    return eis_map(state, log_h_fn, normals, auxiliary, antithetic)


def fit_auxiliary(state: LatentAR1, log_obs_fn, transition_fn, obs_args, normals: jax.Array, guess: jax.Array,
                  settings: EISSettings) -> tuple[AuxiliaryPairs, EISInfo]:
    """The auxiliary parameters (differentiable by implicit differentiation) and diagnostics.

    The start is the one-dimensional engine's Newton start on ``log g_t`` alone (the AR(1) chain,
    no cross terms); the EIS iterations then take in the transition's dependence on the data.
    """
    bound = functools.partial(log_obs_fn, obs_args)
    first = jax.lax.stop_gradient(newton_start(state, bound, guess, settings.n_newton))
    zeros = jnp.zeros_like(first.b_obs)
    start = AuxiliaryPairs(first.b_obs, first.c_obs, zeros, zeros, zeros)
    auxiliary, ((r_squared, failed), iterations, change, step) = implicit_fixed_point(
        functools.partial(_eis_map_of_inputs, log_obs_fn, transition_fn, settings.antithetic), settings,
        (state, obs_args), normals, start,
    )
    return auxiliary, eis_info(iterations, change, r_squared, failed, step, settings.tol)


def eis_loglik_pairs(state: LatentAR1, log_obs_fn, transition_fn, obs_args, guess: jax.Array, key: jax.Array,
                     settings: EISSettings) -> EISPairsOutput:
    """EIS estimate of the log-likelihood of an AR(1) state whose transition depends on the data.

    Args:
      state: the AR(1) coefficients of the reference chain p0 (the model's ``latent``).
      log_obs_fn: ``log_obs_fn(obs_args, paths)``: log g_t at paths (T, S), shape (T, S).
      transition_fn: ``transition_fn(obs_args, x_from)``: the Gaussian law of x_{t+1} given
        x_t = ``x_from`` (T - 1, S) and the data, with ``mean`` and ``sd`` (see :func:`log_pair_terms`).
      obs_args: the pytree (parameters, data) both depend on.
      guess: a rough posterior-mode path (T,) for the Newton start.
      key: JAX PRNG key; the fitting and scoring draws derive from it.
      settings: static settings; ``n_draws`` must identify the six-term pair regression
        (:func:`smle.engine.multi_basis.check_draws` with k = 2).

    Returns:
      An :class:`EISPairsOutput`; its value is differentiable in ``state`` and ``obs_args``.
    """
    multi_basis.check_draws(settings.n_draws, 2, PAIR_BASIS, settings.antithetic)
    fit_normals, score_normals = standard_normals(key, guess.shape[0], settings)
    auxiliary, info = fit_auxiliary(state, log_obs_fn, transition_fn, obs_args, fit_normals, guess, settings)
    sampler = assemble_pairs(state, auxiliary)
    paths = draw_paths(sampler, score_normals)
    log_h = log_pair_terms(state, log_obs_fn, transition_fn, obs_args, paths)
    weights = pair_log_weights(sampler, auxiliary, log_h, paths)
    value = logsumexp(weights) - jnp.log(weights.shape[0])
    cross = jnp.sum(jnp.max(jnp.abs(_cross_terms(auxiliary, paths)), axis=1))
    rounding = rounding_scale(sampler, log_h, paths) + jax.lax.stop_gradient(jnp.finfo(paths.dtype).eps * cross)
    return EISPairsOutput(value, weights, paths, auxiliary, sampler, info, rounding)
