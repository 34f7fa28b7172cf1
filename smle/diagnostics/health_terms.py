"""Per-period terms of the EIS log weights, and each period's share of their variance (for
:func:`smle.check`, :mod:`smle.diagnostics.health`): ``log w = log chi_1 + sum_t term_t``.

For a state whose transition uses the data (kernels over two consecutive states,
:mod:`smle.engine.eis_pairs`) a result keeps only the x_t terms of the pair kernels, so the run is
repeated from its seed and settings and checked to reproduce the result's weights.
"""

from __future__ import annotations

import functools
from typing import Mapping

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine import eis, eis_multi, eis_pairs, kernel
from smle.engine.methods import uses_pairs
from smle.engine.multi_sampler import period_log_weights
from smle.errors import SmleInputError
from smle.likelihood import LoglikResult
from smle.validation import as_key, check_settings, checked_inputs, jax_params


@functools.lru_cache(maxsize=None)
def _period_terms_function(model):
    """Compiled ``(params, y, b_obs, c_obs, paths) -> per-period log-weight terms, (T, S)``."""

    def run(params, y, b_obs, c_obs, paths):
        data = model.prepare(params, y)
        log_obs = model.log_obs_density(params, data, paths)
        if model.state_dim > 1:
            k = model.state_dim
            pairs = eis_multi.check_pairs(model.pairs() or eis_multi.full_pairs(k), k)
            sampler = eis_multi.assemble(model.latent_var(params), eis_multi.AuxiliaryMulti(b_obs, c_obs), pairs)
            return period_log_weights(sampler, log_obs, paths)
        sampler = eis.assemble(model.latent(params), eis.Auxiliary(b_obs, c_obs))
        return eis.period_log_weights(sampler, log_obs, paths)

    return jax.jit(run)


@functools.lru_cache(maxsize=None)
def _pair_terms_function(model, settings: eis.EISSettings):
    """Compiled ``(params, y, key) -> (per-period log-weight terms (T, S), log weights (S,))`` of a
    run with kernels over two consecutive states (:mod:`smle.engine.eis_pairs`), rebuilt from its key.

    A result keeps only the x_t terms of the pair kernels, so the run is repeated (same key and
    settings, so the same paths). Period t's term is ``log h_t`` minus its kernel with the
    ``chi_{t+1}`` constant, plus the cross term ``cross_t x_{t-1} x_t`` that the sampler's kernel
    leaves to the weight; ``log w = log chi_1 + sum_t term_t`` as for one-dimensional kernels."""

    def run(params, y, key):
        out = kernel.eis_output_pairs(model, settings, params, y, key)
        data = model.prepare(params, y)
        log_h = eis_pairs.log_pair_terms(model.latent(params), lambda args, x: model.log_obs_density(*args, x),
                                         lambda args, x: model.path_transition(*args, x), (params, data), out.paths)
        terms = eis.period_log_weights(out.sampler, log_h, out.paths)
        return terms.at[1:].add(out.auxiliary.cross[1:, None] * out.paths[:-1] * out.paths[1:]), out.log_weights

    return jax.jit(run)


PAIR_REBUILD_TOL = 1e-8
"""Largest spread (relative to the largest log weight) of ``log w - sum_t term_t`` across the paths of
a rebuilt pair-kernel run: a larger one means the run was not repeated (other settings)."""


def period_terms(model, params: Mapping, y, result: LoglikResult, tol: float = 1e-6,
                 max_iter: int = 50) -> np.ndarray:
    """Per-period terms of the log weights of ``result``'s scoring paths, shape (T, S).

    ``log w = log chi_1 + sum_t term_t``: term_t is ``log g_t(x_t)`` minus the sampler's Gaussian
    kernel of period t (the chi_{t+1} integrating constant included), evaluated at the paths.

    For a transition that uses the data (kernels over two consecutive states) the run is repeated
    from ``result``'s seed and draws with ``tol`` and ``max_iter`` (those of the run: the defaults
    are :func:`check`'s), and ``log h_t`` replaces ``log g_t``; a run that does not reproduce
    ``result``'s weights is refused.
    """
    model, checked, y = checked_inputs(model, params, y)
    if uses_pairs(model):
        settings = check_settings(result.n_draws, result.antithetic, tol, max_iter, result.n_score_draws)
        terms, log_weights = (np.asarray(a) for a in _pair_terms_function(model, settings)(
            jax_params(checked), jnp.asarray(y), as_key(result.seed)))
        offset = np.asarray(result.log_weights) - terms.sum(axis=0)
        if not (log_weights.shape == result.log_weights.shape
                and np.ptp(offset) <= PAIR_REBUILD_TOL * max(np.abs(result.log_weights).max(), 1.0)):
            raise SmleInputError(f"the run of seed {result.seed} was not reproduced with tol = {tol!r}, max_iter = "
                                 f"{max_iter!r}; accepted: the tol and max_iter the result was computed with")
        return terms
    terms = _period_terms_function(model)(jax_params(checked), jnp.asarray(y), jnp.asarray(result.b_obs),
                                          jnp.asarray(result.c_obs), jnp.asarray(result.paths))
    return np.asarray(terms)


def variance_shares(terms: np.ndarray) -> np.ndarray:
    """Covariance share of each period in the variance of the total log weight, shape (T,).

    ``share_t = cov(term_t, sum_s term_s) / var(sum_s term_s)`` across draws: the shares sum to
    one, a period with a large positive share moves the total log weight, a negative share damps it.
    """
    total = terms.sum(axis=0)
    centred_total = total - total.mean()
    variance = float(np.mean(centred_total**2))
    if variance <= 0.0:
        return np.zeros(terms.shape[0])
    covariance = (terms - terms.mean(axis=1, keepdims=True)) @ centred_total / terms.shape[1]
    return covariance / variance
