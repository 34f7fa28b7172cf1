"""The likelihood methods, compiled: one JIT-compiled program per (model, settings, control
variates), reused for every data set of the same shape.

This is the one place a method is dispatched from. The methods: EIS (:func:`compiled_eis`:
:mod:`smle.engine.eis` through :mod:`smle.engine.kernel`, with the control variates of
:mod:`smle.engine.control`), and the closed form of models without a latent state
(:func:`compiled_closed_form`, ``state_dim == 0``). A new method lives in its own module
``smle/engine/<method>.py`` and gets its compiled entry here, beside :func:`compiled_eis`.
"""

from __future__ import annotations

import functools

import jax

from smle.engine import eis
from smle.engine.control import ControlSpec, controlled_output
from smle.errors import SmleInputError


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
