"""The model-to-EIS kernel: one pure, differentiable EIS evaluation of a model at parameters.

A model instance is passed in (its ``latent``, ``log_obs_density``, ``prepare`` and
``mode_guess``; with a k-dimensional state ``latent_var`` and ``pairs``); the engine never
imports the models package.
"""

from __future__ import annotations

import functools
from typing import Mapping

from smle.engine import eis, eis_multi, eis_pairs, particle_eis


def eis_output(model, settings: eis.EISSettings, params: Mapping, y, key, warm=None) -> eis.EISOutput:
    """Pure, differentiable EIS evaluation of ``model`` at ``params`` (a mapping of JAX scalars);
    ``warm``: auxiliary parameters to start the EIS iteration from (None: the Newton start)."""
    data = model.prepare(params, y)
    return eis.eis_loglik(
        model.latent(params), _log_obs_function(model), (params, data), model.mode_guess(params, data), key, settings,
        warm,
    )


def eis_output_multi(model, settings: eis.EISSettings, params: Mapping, y, key) -> eis_multi.EISMultiOutput:
    """Pure, differentiable EIS evaluation of a model with a k-dimensional VAR(1) state (k > 1)."""
    data = model.prepare(params, y)
    return eis_multi.eis_loglik_multi(
        model.latent_var(params), _log_obs_function(model), (params, data), model.mode_guess(params, data), key,
        settings, model.pairs(),
    )


def eis_output_pairs(model, settings: eis.EISSettings, params: Mapping, y, key) -> eis_pairs.EISPairsOutput:
    """Pure, differentiable EIS evaluation of a model whose transition depends on the data (its
    ``path_transition`` hook), with kernels over two consecutive states."""
    data = model.prepare(params, y)
    return eis_pairs.eis_loglik_pairs(
        model.latent(params), _log_obs_function(model), _log_obs_function(model, "path_transition"), (params, data),
        model.mode_guess(params, data), key, settings,
    )


def particle_output(model, settings: eis.EISSettings, params: Mapping, y, key,
                    resample_threshold: float = particle_eis.RESAMPLE_THRESHOLD) -> particle_eis.ParticleOutput:
    """Particle EIS evaluation of ``model`` at ``params`` (:mod:`smle.engine.particle_eis`), with a
    one-dimensional or a k-dimensional VAR(1) state; the per-period log g_t comes from the model's
    ``period_data``."""
    data = model.prepare(params, y)
    common = (_log_obs_function(model), _period_log_obs_function(model), (params, data),
              model.mode_guess(params, data), key, settings)
    if model.state_dim > 1:
        return particle_eis.particle_eis_loglik_multi(model.latent_var(params), *common, model.pairs(),
                                                      resample_threshold)
    return particle_eis.particle_eis_loglik(model.latent(params), *common, resample_threshold)


@functools.lru_cache(maxsize=None)
def _period_log_obs_function(model):
    """``(obs_args, t, x) -> log g_t`` at states x of shape (S,) (or (S, k)), from the model's ``period_data``."""

    def period_log_obs(obs_args, t, x):
        params, data = obs_args
        return model.log_obs_density(params, model.period_data(data, t), x[None, :])[0]

    return period_log_obs


@functools.lru_cache(maxsize=None)
def _log_obs_function(model, hook: str = "log_obs_density"):
    """``(obs_args, paths) -> model.<hook>(params, data, paths)``: log g_t (or, with ``path_transition``,
    the law of x_{t+1}); one function object per model and hook, so compiled code is reused."""
    method = getattr(model, hook)

    def log_obs(obs_args, paths):
        params, data = obs_args
        return method(params, data, paths)

    return log_obs
