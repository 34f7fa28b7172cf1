"""Pieces shared by the particle filters of :mod:`smle.diagnostics.filtering` (one-dimensional state)
and :mod:`smle.diagnostics.filtering_multi` (k dimensions): the compiled filter's output, whether a
model gives PITs, and systematic resampling (Kitagawa 1996, J. Comput. Graph. Statist. 5)."""

from __future__ import annotations

from typing import NamedTuple

import jax
import jax.numpy as jnp

from smle.models import Model

NEWTON_STEPS = 8
"""Newton steps to each period's mode behind the proposal kernels (both filters)."""
MIN_CURVATURE = 1e-8
"""Floor of the proposal kernels' curvature (an integrable kernel where log g_t is flat)."""
QUANTILES = (0.05, 0.95)
"""The filtered band's probabilities."""


class FilterOutput(NamedTuple):
    """What the compiled filter returns (JAX arrays, leading dimension T).

    Attributes:
      filtered_mean: E[x_t | y_1..y_t], shape (T,) ((T, k) for a k-dimensional state, as for
        every state summary); filtered_sd: its standard deviation.
      filtered_quantiles: 5% and 95% quantiles of x_t given y_1..y_t, shape (2, T) (or (2, T, k)).
      log_predictive: log p(y_t | y_1..y_{t-1}), shape (T,).
      pit: PIT of each series under its one-step predictive law, shape (T, n_series)
        (zeros when the model has no ``obs_cdf``).
      ess: effective sample size of the weights after period t's observation, shape (T,).
      resampled: whether the particles were resampled after period t, shape (T,).
    """

    filtered_mean: jax.Array
    filtered_sd: jax.Array
    filtered_quantiles: jax.Array
    log_predictive: jax.Array
    pit: jax.Array
    ess: jax.Array
    resampled: jax.Array


def has_obs_cdf(model: Model) -> bool:
    """Whether the model supplies its conditional CDF (needed for PITs)."""
    return type(model).obs_cdf is not Model.obs_cdf


def systematic_ancestors(log_weights: jax.Array, uniform: jax.Array) -> jax.Array:
    """Ancestor indices of systematic resampling, shape (N,), from normalised log weights.

    The j-th stratum point ``(uniform + j) / N`` takes the first particle whose cumulative
    weight exceeds it; counting by a scatter-add keeps the cost O(N).
    """
    n = log_weights.shape[0]
    cdf = jnp.cumsum(jnp.exp(log_weights - jnp.max(log_weights)))
    cdf = cdf / cdf[-1]
    position = jnp.clip(jnp.ceil(n * cdf - uniform), 0, n).astype(jnp.int32)
    marks = jnp.zeros((n + 1,), jnp.int32).at[position].add(1)
    return jnp.minimum(jnp.cumsum(marks[:n]), n - 1)
