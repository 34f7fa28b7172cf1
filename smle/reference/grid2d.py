"""Deterministic two-dimensional grid filter: the exact reference for models whose state is two
independent stationary Gaussian AR(1) components (``sv-2factor``).

A point-mass filter on a product grid (Kitagawa 1987, JASA 82; Bucy and Senne 1971,
Automatica 7): the predictive mass on the grid is multiplied by g_t(y_t | x) at the nodes,
normalised (the normalising constant is the period's likelihood contribution), and moved one
period ahead by the transition kernel. With independent components the kernel is a product, so
the prediction is ``K_1 P K_2'``, two matrix products per period. Each axis spans ``width``
stationary standard deviations either side of the mean, with the rectangle rule; refining the
grid is how its accuracy is checked (see the tests).
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np
from scipy.stats import norm

from smle.errors import SmleInputError
from smle.validation import check_integer, checked_inputs, jax_params


@functools.partial(jax.jit, static_argnums=0)
def _log_obs(model, params, data, x):
    return model.log_obs_density(params, data, x)


def _axes(state, n_points, width):
    """Per component: grid nodes, transition kernel (node to node, times the spacing), start mass."""
    transition, innovation = np.asarray(state.transition), np.asarray(state.innovation_cov)
    if np.any(transition != np.diag(np.diag(transition))) or np.any(innovation != np.diag(np.diag(innovation))):
        raise SmleInputError("the two-dimensional grid filter needs independent components (diagonal transition "
                             "and innovation covariance)")
    mean, sd = np.asarray(state.init_mean), np.sqrt(np.diag(np.asarray(state.init_cov)))
    axes = []
    for j, n in enumerate(n_points):
        nodes = mean[j] + np.linspace(-width * sd[j], width * sd[j], n)
        spacing = nodes[1] - nodes[0]
        centre = mean[j] + transition[j, j] * (nodes[None, :] - mean[j])
        kernel = norm.pdf(nodes[:, None], centre, np.sqrt(innovation[j, j])) * spacing
        axes.append((nodes, kernel, norm.pdf(nodes, mean[j], sd[j]) * spacing))
    return axes


def grid2d_loglik(model, params, y, n_points=(121, 41), width: float = 6.5, block: int = 100) -> float:
    """Log-likelihood of a model with a two-dimensional state of independent AR(1) components.

    Args:
      model: registered name or instance with ``state_dim == 2`` (its ``latent_var`` diagonal).
      params: parameter values by name.
      y: the observations.
      n_points: grid nodes per component (the persistent component needs the finer grid).
      width: half-width of each axis in stationary standard deviations.
      block: periods whose observation densities are evaluated in one call.
    """
    model, checked, y = checked_inputs(model, params, y)
    if model.state_dim != 2:
        raise SmleInputError(f"model '{model.name}' has a state of dimension {model.state_dim}; grid2d_loglik "
                             "accepts models with state_dim == 2")
    n_points = tuple(check_integer("n_points", int(n), 3) for n in n_points)
    values = jax_params(checked)
    (nodes1, kernel1, start1), (nodes2, kernel2, start2) = _axes(model.latent_var(values), n_points, width)
    points = np.stack(np.meshgrid(nodes1, nodes2, indexing="ij"), axis=-1).reshape(-1, 2)
    data = model.prepare(values, jnp.asarray(y))
    predicted = np.outer(start1, start2)
    total = 0.0
    for first in range(0, y.shape[0], block):
        chunk = jax.tree.map(lambda leaf: leaf[first:first + block], data)
        length = jax.tree.leaves(chunk)[0].shape[0]
        log_g = np.asarray(_log_obs(model, values, chunk, jnp.broadcast_to(points, (length,) + points.shape)))
        for row in log_g:
            top = row.max()
            joint = predicted * np.exp(row - top).reshape(n_points)
            mass = joint.sum()
            total += np.log(mass) + top
            predicted = kernel1 @ (joint / mass) @ kernel2.T
    return float(total)
