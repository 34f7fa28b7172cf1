"""The model-to-EIS kernel: one pure, differentiable EIS evaluation of a model at parameters.

A model instance is passed in (its ``latent``, ``log_obs_density``, ``prepare`` and
``mode_guess``; with a k-dimensional state ``latent_var`` and ``pairs``); the engine never
imports the models package.
"""

from __future__ import annotations

import functools
from typing import Mapping

from smle.engine import eis, eis_multi


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


@functools.lru_cache(maxsize=None)
def _log_obs_function(model):
    """``(obs_args, paths) -> log g_t``: one function object per model, so compiled code is reused."""

    def log_obs(obs_args, paths):
        params, data = obs_args
        return model.log_obs_density(params, data, paths)

    return log_obs
