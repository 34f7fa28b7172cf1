"""A fixed point found by iteration and differentiated by the implicit function theorem.

Shared by the EIS engines (:mod:`smle.engine.fixed_point` for the scalar state,
:mod:`smle.engine.eis_multi` for a VAR(1) state): the auxiliary parameters are the fixed point
``a* = Phi(a*; inputs)`` of one EIS iteration, any pytree. The forward pass iterates ``Phi`` to a
relative tolerance; the custom VJP solves the adjoint equation ``w = cotangent + A' w`` (A the
Jacobian of ``Phi`` in ``a`` at the fixed point) by fixed-point iteration, with restarted GMRES as
the fallback, so the gradient is the exact gradient of the function evaluated (auxiliary
parameters re-fitted at every input with the same random numbers). Richard and Zhang (2007),
J. Econometrics 141; the implicit-gradient construction as in Christianson (1994), Optimization
Methods and Software 3.
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp


def relative_change(new, old):
    """Largest relative change ``|new - old| / (1 + |old|)`` over every leaf of a pytree."""
    changes = jax.tree.map(lambda n, o: jnp.max(jnp.abs(n - o) / (1.0 + jnp.abs(o))), new, old)
    return jnp.max(jnp.stack(jax.tree.leaves(changes)))


MIN_STEP = 1.0 / 16
"""Smallest fraction of the EIS update taken by the damped iteration."""


def iterate_to_fixed_point(update, start, extra_template, tol, max_iter: int):
    """Iterate ``a <- a + step (update(a) - a)`` until the relative change of the full update is
    at most tol or max_iter is reached.

    The step starts at 1 (plain EIS) and is halved, down to :data:`MIN_STEP`, whenever the full
    update's change grows: at a fixed point it is the same fixed point, and damping turns the
    two-cycles that undamped EIS falls into at wide, nearly independent states (sigma_eta of 2
    and more) into convergence. ``update`` returns ``(new, extra)``; the last ``extra`` (a pytree
    shaped like ``extra_template``: the regressions' R^2, failed regressions) is carried out.
    Returns ``(a, extra, iterations, last change, last step)``.
    """

    def cond(carry):
        _, _, iteration, change, _ = carry
        return (iteration < max_iter) & (change > tol)

    def body(carry):
        current, _, iteration, previous_change, step = carry
        full, extra = update(current)
        change = relative_change(full, current)
        step = jnp.where(change > previous_change, jnp.maximum(0.5 * step, MIN_STEP), step)
        taken = jnp.where(change <= tol, 1.0, step)
        new = jax.tree.map(lambda a, b: a + taken * (b - a), current, full)
        return new, extra, iteration + 1, change, step

    dtype = jax.tree.leaves(start)[0].dtype
    inf = jnp.asarray(jnp.inf, dtype)
    return jax.lax.while_loop(cond, body, (start, extra_template, jnp.asarray(0), inf, jnp.asarray(1.0, dtype)))


def solve_adjoint(transposed_map, cotangent, tol, max_iter: int):
    """Solve ``w = cotangent + A' w`` by fixed-point iteration, A the EIS map's Jacobian in a.

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
        # ill-conditioned exact case): solve (I - A') w = cotangent by restarted GMRES instead
        def operator(v):
            return jax.tree.map(jnp.subtract, v, transposed_map(v))

        solution, _ = jax.scipy.sparse.linalg.gmres(
            operator, cotangent, x0=cotangent, tol=tol, atol=0.0, restart=20, maxiter=max(1, max_iter // 20),
            solve_method="batched",
        )
        return solution

    return jax.lax.cond(finite & (change <= tol), lambda _: w, krylov, None)


@functools.partial(jax.custom_vjp, nondiff_argnums=(0, 1))
def implicit_fixed_point(eis_map_fn, settings, inputs, normals, start):
    """The fixed point ``a* = Phi(a*; inputs)`` with diagnostics ``(extra, iterations, change, step)``.

    Args:
      eis_map_fn: ``eis_map_fn(inputs, normals, a) -> (new a, extra)``, one EIS iteration (extra: any
        pytree of diagnostics, e.g. the regressions' R^2)
        (static: a pure function).
      settings: static; its ``tol``, ``max_iter``, ``tangent_tol`` and ``max_tangent_iter`` are used.
      inputs: the differentiable quantities (for EIS: the state and the observation arguments).
      normals: the fitting draws (not differentiated).
      start: the starting auxiliary parameters, a pytree whose first leaf is indexed by period.

    The custom VJP applies the implicit function theorem: d a*/d inputs = (I - A)^{-1} dPhi/d inputs.
    """
    shapes = jax.eval_shape(lambda a: eis_map_fn(inputs, normals, a)[1], start)
    template = jax.tree.map(lambda leaf: jnp.zeros(leaf.shape, leaf.dtype), shapes)
    fixed, extra, iterations, change, step = iterate_to_fixed_point(
        lambda a: eis_map_fn(inputs, normals, a), start, template, settings.tol, settings.max_iter
    )
    dtype = jax.tree.leaves(start)[0].dtype
    return fixed, (extra, iterations.astype(dtype), change, step)


def _forward(eis_map_fn, settings, inputs, normals, start):
    out = implicit_fixed_point(eis_map_fn, settings, inputs, normals, start)
    return out, (inputs, normals, start, out[0])


def _backward(eis_map_fn, settings, residuals, cotangents):
    inputs, normals, start, fixed = residuals
    _, vjp = jax.vjp(lambda inputs_, a: eis_map_fn(inputs_, normals, a)[0], inputs, fixed)
    adjoint = solve_adjoint(lambda w: vjp(w)[1], cotangents[0], settings.tangent_tol, settings.max_tangent_iter)
    inputs_cotangent, _ = vjp(adjoint)
    return inputs_cotangent, jnp.zeros_like(normals), jax.tree.map(jnp.zeros_like, start)


implicit_fixed_point.defvjp(_forward, _backward)
