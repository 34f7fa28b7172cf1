"""The optimiser of :func:`smle.fit`: L-BFGS (optax's direction, a weak Wolfe line search in
Python around one compiled value-and-gradient program), the Hessian by central differences of
the exact gradient, and the line said on standard error while the first call compiles."""

from __future__ import annotations

import functools
import math
import sys
import time

import jax
import jax.numpy as jnp
import numpy as np
import optax


@functools.lru_cache(maxsize=None)
def _direction_transform(memory_size: int = 10):
    solver = optax.chain(optax.scale_by_lbfgs(memory_size=memory_size), optax.scale(-1.0))
    return solver, jax.jit(solver.update)


def lbfgs(evaluate, u0, max_steps, gtol, verbose):
    """L-BFGS: optax's two-loop recursion for the direction, a weak Wolfe line search.

    ``evaluate(u) -> (value, aux, gradient)``. The line search (bisection and doubling on the
    Armijo and curvature conditions; Lewis and Overton 2013, Math. Programming 141) keeps
    s'y > 0 so that the L-BFGS memory stays positive definite.
    """
    solver, update = _direction_transform()
    state = solver.init(u0)
    u = u0
    value, aux, grad = evaluate(u)
    evaluations, steps, stalled = 1, 0, False
    while steps < max_steps and float(jnp.max(jnp.abs(grad))) > gtol:
        direction, state = update(grad, state, u)
        slope = float(jnp.vdot(grad, direction))
        if not slope < 0:  # not a descent direction: restart the memory with steepest descent
            state = solver.init(u)
            direction, slope = -grad, -float(jnp.vdot(grad, grad))
        lower, upper, alpha = 0.0, math.inf, 1.0
        accepted = None
        for _ in range(40):
            trial = u + alpha * direction
            t_value, t_aux, t_grad = evaluate(trial)
            evaluations += 1
            if not math.isfinite(float(t_value)) or float(t_value) > float(value) + 1e-4 * alpha * slope:
                upper = alpha
            elif float(jnp.vdot(t_grad, direction)) < 0.9 * slope:
                lower = alpha
            else:
                accepted = (trial, t_value, t_aux, t_grad)
                break
            alpha = 0.5 * (lower + upper) if math.isfinite(upper) else 2.0 * alpha
        steps += 1
        if accepted is None:
            stalled = True
            break
        u, value, aux, grad = accepted
        if verbose:
            print(f"  step {steps:3d}   -loglik/T {float(value):.8f}   max|grad| {float(jnp.max(jnp.abs(grad))):.2e}",
                  file=sys.stderr, flush=True)
    return dict(u=np.asarray(u), value=float(value), aux=aux, grad_norm=float(jnp.max(jnp.abs(grad))),
                steps=steps, evaluations=evaluations, stalled=stalled, max_steps=max_steps, gtol=gtol)


def hessian_by_differences(evaluate, u, n_periods, step=1e-4):
    """Hessian of minus the total log-likelihood in u, by central differences of the exact gradient."""
    columns = []
    for i in range(u.shape[0]):
        e = np.zeros(u.shape[0])
        e[i] = step
        plus = np.asarray(evaluate(u + e)[2])
        minus = np.asarray(evaluate(u - e)[2])
        columns.append((plus - minus) / (2 * step))
    hessian = np.column_stack(columns) * n_periods
    return 0.5 * (hessian + hessian.T)


COMPILED_SHAPES: set = set()


def announce_compilation(evaluate, program, what: str, shape: str):
    """``evaluate``, saying on standard error before its first call that the likelihood of ``what``
    is being compiled (the first time this process runs ``program``, a compiled function and its
    data shape), about how long that took last time, and afterwards how long it took
    (remembered in the compilation cache folder)."""
    if program in COMPILED_SHAPES:
        return evaluate
    COMPILED_SHAPES.add(program)
    from smle import _config

    last = _config.compile_seconds(what)
    guess = f"~{last:.0f} s" if last is not None else "10-20 s"
    print(f"compiling the likelihood for {what}, {shape}: this takes {guess} the first time "
          "(later fits of this shape reuse it)", file=sys.stderr, flush=True)
    pending = [True]

    def first_call(u):
        if not pending:
            return evaluate(u)
        started = time.perf_counter()
        out = evaluate(u)
        jax.block_until_ready(out)
        seconds = time.perf_counter() - started
        pending.clear()
        print(f"compiled and evaluated in {seconds:.1f} s", file=sys.stderr, flush=True)
        _config.remember_compile_seconds(what, seconds)
        return out

    return first_call
