"""The likelihood methods, compiled: one JIT-compiled program per (model, settings, control
variates), reused for every data set of the same shape.

This is the one place a method is dispatched from. Today there is one method, EIS
(:func:`compiled_eis`: :mod:`smle.engine.eis` through :mod:`smle.engine.kernel`, with the
control variates of :mod:`smle.engine.control`). A new method lives in its own module
``smle/engine/<method>.py`` and gets its compiled entry here, beside :func:`compiled_eis`.
"""

from __future__ import annotations

import functools

import jax

from smle.engine import eis
from smle.engine.control import ControlSpec, controlled_output


@functools.lru_cache(maxsize=None)
def compiled_eis(model, settings: eis.EISSettings, control: ControlSpec = ControlSpec()):
    """The JIT-compiled EIS kernel for a model, settings and control variates (once per data shape)."""

    def run(params, y, key):
        out, extra = controlled_output(model, settings, control, params, y, key)
        diagnostics = eis.weight_diagnostics(out.log_weights, settings.antithetic)
        return out, diagnostics, extra

    return jax.jit(run)
