"""Summaries of the latent state from weighted draws (importance-sampling paths or particles)."""

from __future__ import annotations

import jax
import jax.numpy as jnp


def weighted_quantiles(x, weights, probabilities, n_bisections: int = 30):
    """Weighted quantiles of particles ``x`` (N,) with normalised ``weights`` by bisection.

    Bisection on the weighted empirical CDF between the smallest and largest particle: the
    bracket shrinks to (max - min) / 2^30, far below the Monte Carlo error, and costs O(N)
    per step, against a sort that took four times as long for 2000 particles on CPU.
    """
    probabilities = jnp.asarray(probabilities, x.dtype)
    lower = jnp.full(probabilities.shape, jnp.min(x))
    upper = jnp.full(probabilities.shape, jnp.max(x))

    def bisect(_, bracket):
        lower, upper = bracket
        middle = 0.5 * (lower + upper)
        below = (x[None, :] <= middle[:, None]).astype(x.dtype) @ weights
        short = below < probabilities
        return jnp.where(short, middle, lower), jnp.where(short, upper, middle)

    _, upper = jax.lax.fori_loop(0, n_bisections, bisect, (lower, upper))
    return upper


def path_quantiles(paths, weights, probabilities):
    """Per-period weighted quantiles of paths (T, S) with normalised weights (S,): shape (k, T)."""
    paths = jnp.asarray(paths)
    per_period = jax.vmap(weighted_quantiles, in_axes=(0, None, None))
    return per_period(paths, jnp.asarray(weights, paths.dtype), probabilities).T
