"""The factor's filtered and smoothed laws, one-step predictive densities and PITs without simulation,
for a model whose latent state is one-dimensional (the ``exact`` route of :func:`smle.filter_factor`).

Two filters give them exactly (to the reported accuracy), as for the exact likelihood
(:mod:`smle.exact_likelihood`):

* linear Gaussian models (``ar1-noise``, ``local-level``): the Kalman filter (Kalman 1960) and the
  Rauch-Tung-Striebel smoother (Durbin and Koopman 2012, sec. 4.4); every law is Gaussian, so the
  5%/95% bands are ``mean -+ 1.6449 sd`` and the PIT is ``Phi(v_t / sqrt(F_t))`` with the
  innovation ``v_t`` and its variance ``F_t``;
* every other model: the grid filter (Kitagawa 1987, JASA 82) on the grid the exact likelihood
  chose and checked (:func:`smle.exact_likelihood.exact_run`); its backward pass gives the smoothed
  law, the predicted masses the PITs ``sum_i p(x_i | y_1..y_{t-1}) F(y_t | x_i)`` with the model's
  conditional CDF, and the bands are quantiles of the grid laws
  (:func:`smle.engine.exact_smoothing.quantile_band`).
"""

from __future__ import annotations

import functools
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from scipy.stats import norm

from smle.engine.exact_smoothing import predicted_masses, predictive_pit, quantile_band, smooth
from smle.engine.kalman import kalman_filter, kalman_smoother
from smle.exact_likelihood import ExactRun, exact_run, is_linear_gaussian, log_g_on, on_states
from smle.models import Model

LEVELS = (0.05, 0.95)


class ExactFactor(NamedTuple):
    """The exact route's output (NumPy arrays, leading dimension T).

    Attributes:
      loglik: log L = sum of ``log_predictive``.
      log_predictive: log p(y_t | y_1..y_{t-1}).
      filtered_mean, filtered_sd, filtered_lower, filtered_upper: moments and 5%/95% quantiles of
        x_t given y_1..y_t.
      smoothed_mean, smoothed_sd, smoothed_lower, smoothed_upper: the same given y_1..y_T.
      pit: PITs, shape (T, n_series), or None without a conditional CDF.
      engine: "Kalman filter" or "grid filter"; grid_size: points of the grid (0: Kalman filter);
      error_bound: the grid's accuracy estimate of ``loglik`` (0: Kalman filter, exact to rounding).
    """

    loglik: float
    log_predictive: np.ndarray
    filtered_mean: np.ndarray
    filtered_sd: np.ndarray
    filtered_lower: np.ndarray
    filtered_upper: np.ndarray
    smoothed_mean: np.ndarray
    smoothed_sd: np.ndarray
    smoothed_lower: np.ndarray
    smoothed_upper: np.ndarray
    pit: np.ndarray | None
    engine: str
    grid_size: int
    error_bound: float


@functools.lru_cache(maxsize=None)
def _kalman_parts(model: Model):
    """``(params, y) -> (filter output, smoothed mean, smoothed variance)``, compiled per shape."""
    def run(params, y):
        state, obs_var = model.latent(params), model.gaussian_measurement(params)
        return (kalman_filter(y, state, obs_var),) + tuple(kalman_smoother(y, state, obs_var))
    return jax.jit(run)


def _gaussian_band(mean, sd):
    return tuple(mean + norm.ppf(level) * sd for level in LEVELS)


def kalman_factor(model: Model, params, y) -> ExactFactor:
    """The exact route for a linear Gaussian model (``params``: JAX scalars by name)."""
    out, smoothed_mean, smoothed_var = (jax.tree_util.tree_map(np.asarray, part)
                                        for part in _kalman_parts(model)(params, jnp.asarray(y)))
    innovation, variance = out.innovation, out.innovation_var
    log_predictive = -0.5 * (np.log(2 * np.pi) + np.log(variance) + innovation**2 / variance)
    filtered_sd, smoothed_sd = np.sqrt(out.filtered_var), np.sqrt(smoothed_var)
    return ExactFactor(
        float(np.sum(log_predictive)), log_predictive, out.filtered_mean, filtered_sd,
        *_gaussian_band(out.filtered_mean, filtered_sd), smoothed_mean, smoothed_sd,
        *_gaussian_band(smoothed_mean, smoothed_sd), norm.cdf(innovation / np.sqrt(variance))[:, None],
        "Kalman filter", 0, 0.0)


def grid_factor(model: Model, params, y, run: ExactRun, with_cdf: bool) -> ExactFactor:
    """The exact route on the grid of ``run`` (an :class:`~smle.exact_likelihood.ExactRun` of the
    grid filter; ``params``: JAX scalars by name)."""
    y = jnp.asarray(y)
    spec, state = run.spec, model.latent(params)
    log_g = log_g_on(model, params, y, spec)
    masses = predicted_masses(state, log_g, spec)
    filtered_lower, filtered_upper = quantile_band(masses[1], spec, LEVELS)
    smoothed = smooth(state, log_g, spec, levels=LEVELS, masses=masses)
    pit = None
    if with_cdf:
        cdf = on_states(model, "obs_cdf")(params, y, jnp.broadcast_to(spec.points(), log_g.shape))
        pit = np.asarray(predictive_pit(state, log_g, spec, cdf.reshape(*log_g.shape, model.n_series),
                                        masses=masses))
    return ExactFactor(
        run.loglik, run.log_predictive, run.filtered_mean, run.filtered_sd, np.asarray(filtered_lower),
        np.asarray(filtered_upper), *(np.asarray(a) for a in smoothed[:4]), pit, run.engine, run.grid_size,
        run.error_bound)


def exact_factor(model: Model, params, y, tol: float, with_cdf: bool) -> ExactFactor:
    """The exact route for a model with a one-dimensional state: the Kalman filter for a linear
    Gaussian model, the checked grid filter otherwise (``tol``: its accuracy, log-likelihood units)."""
    if is_linear_gaussian(model):
        return kalman_factor(model, params, y)
    return grid_factor(model, params, y, exact_run(model, params, y, tol), with_cdf)
