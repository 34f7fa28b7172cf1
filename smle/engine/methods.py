"""The likelihood methods, compiled: one JIT-compiled program per (model, settings, control
variates), reused for every data set of the same shape.

This is the one place a method is dispatched from. The methods: EIS (:func:`compiled_eis`:
:mod:`smle.engine.eis` through :mod:`smle.engine.kernel`, with the control variates of
:mod:`smle.engine.control`), its form for a k-dimensional VAR(1) state
(:func:`compiled_eis_multi`: :mod:`smle.engine.eis_multi`, no control variates yet), and with
kernels over two consecutive states for a transition that uses the data (:mod:`smle.engine.eis_pairs`,
through the same entry), chosen by :func:`eis_entry` from the model's ``state_dim`` and transition, and the closed form of models without a latent
state (:func:`compiled_closed_form`, ``state_dim == 0``). A new method lives in its own module
``smle/engine/<method>.py`` and gets its compiled entry here, beside :func:`compiled_eis`.
"""

from __future__ import annotations

import functools

import jax

from smle.engine import eis
from smle.engine.control import ControlSpec, controlled_output
from smle.errors import SmleInputError
from smle.engine.kernel import eis_output_multi, eis_output_pairs, particle_output


@functools.lru_cache(maxsize=None)
def compiled_eis(model, settings: eis.EISSettings, control: ControlSpec = ControlSpec()):
    """The JIT-compiled EIS kernel for a model, settings and control variates (once per data shape)."""
    if model.state_dim == 0:
        raise SmleInputError(
            f"model '{model.name}' has no latent state: its likelihood is exact (closed form), so there is "
            "no simulation and no simulation error to measure or check; use smle.loglik or smle.fit"
        )

    def run(params, y, key):
        out, extra = controlled_output(model, settings, control, params, y, key)
        diagnostics = eis.weight_diagnostics(out.log_weights, settings.antithetic)
        return out, diagnostics, extra

    return jax.jit(run)


@functools.lru_cache(maxsize=None)
def compiled_closed_form(model):
    """The JIT-compiled exact log-likelihood of a model without a latent state (``state_dim == 0``).

    ``(params, y) -> log L``: the model's own ``loglik_closed_form``, a sum of one-step
    predictive log-densities; no simulation, so no numerical standard error.
    """
    return jax.jit(model.loglik_closed_form)


def uses_pairs(model) -> bool:
    """Whether EIS runs with kernels over two consecutive states (a transition that uses the data)."""
    return model.state_dim == 1 and model.transition_uses_data


def multi_output(model, settings: eis.EISSettings, params, y, key):
    """``(out, extra)`` of EIS with a k-dimensional state or with pair kernels, in the form of
    ``controlled_output`` (``extra["value"]`` is the estimate; no control variates for these yet)."""
    out = (eis_output_pairs if uses_pairs(model) else eis_output_multi)(model, settings, params, y, key)
    return out, {"value": out.value}


@functools.lru_cache(maxsize=None)
def compiled_eis_multi(model, settings: eis.EISSettings):
    """The JIT-compiled EIS kernel for a model with ``state_dim > 1`` or pair kernels (same outputs
    as :func:`compiled_eis`)."""

    def run(params, y, key):
        out, extra = multi_output(model, settings, params, y, key)
        return out, eis.weight_diagnostics(out.log_weights, settings.antithetic), extra

    return jax.jit(run)


@functools.lru_cache(maxsize=None)
def compiled_particle_eis(model, settings: eis.EISSettings, resample_threshold: float):
    """The JIT-compiled particle EIS kernel (:mod:`smle.engine.particle_eis`): ``(params, y, key)
    -> ParticleOutput``, for a state (of any dimension) whose transition does not use the data."""

    def run(params, y, key):
        return particle_output(model, settings, params, y, key, resample_threshold)

    return jax.jit(run)


def eis_entry(model, settings: eis.EISSettings, control: ControlSpec = ControlSpec()):
    """The compiled EIS kernel for the model's state dimension and transition."""
    if model.state_dim > 1 or uses_pairs(model):
        return compiled_eis_multi(model, settings)
    return compiled_eis(model, settings, control)


def warm_starts(model) -> bool:
    """Whether a fit can start each evaluation's EIS iteration from the previous one's auxiliary
    parameters: the one-dimensional engine (not the k-dimensional one, not pair kernels)."""
    return model.state_dim == 1 and not uses_pairs(model)


def eis_evaluation(model, settings: eis.EISSettings, control: ControlSpec, params, y, key, warm=None):
    """``(out, extra)``, uncompiled and differentiable, for the model's state (what fit traces);
    ``warm`` (the one-dimensional engine only: :func:`warm_starts`) starts the EIS iteration."""
    if model.state_dim > 1 or uses_pairs(model):
        return multi_output(model, settings, params, y, key)
    return controlled_output(model, settings, control, params, y, key, warm)
