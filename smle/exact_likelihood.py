"""The exact log-likelihood of a model whose latent state is one-dimensional: the method ``exact``.

Two filters give it without simulation: the Kalman filter (Kalman 1960) where the model is
linear Gaussian (the model's ``gaussian_measurement`` hook; random-walk state included), and the
grid filter of :mod:`smle.engine.exact` (Kitagawa 1987, JASA 82) otherwise, with its grid placed
and sized from the parameters and the data and its accuracy checked against a coarser grid
(``error_bound``). :func:`resolve_method` turns the user's ``method`` ("auto", "exact", "eis")
into the method that runs; ``auto`` is exact wherever the state is one-dimensional.

For estimation the grid must move smoothly with the parameters: :func:`moving_grid_loglik`
keeps the grid's range fixed in units of the state's stationary law (its mean and standard
deviation at the parameters being evaluated) and its size fixed, so that the log-likelihood is
a smooth function of the parameters that JAX differentiates; :mod:`smle.fit_exact` checks the
grid again at the estimate.
"""

from __future__ import annotations

import functools
import inspect
import math
import warnings
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine import exact
from smle.engine.exact import ExactGrid
from smle.engine.kalman import kalman_filter, kalman_smoother
from smle.errors import SmleInputError
from smle.models import Model

METHODS = ("auto", "exact", "eis")
EXACT_TOL = 1e-6
"""Default accuracy of the exact log-likelihood (absolute, log-likelihood units)."""


def resolve_method(model: Model, method) -> str:
    """The method that runs: "closed form" (no latent state), "exact" or "eis".

    ``auto`` is ``exact`` where the state is one-dimensional (faster than EIS there and free of
    simulation error: experiments/results/bench_exact.md) and ``eis`` where it has more dimensions.
    """
    if method not in METHODS:
        raise SmleInputError(f"method = {method!r} is not accepted; accepted: 'auto', 'exact' or 'eis'")
    if model.state_dim == 0:
        return "closed form"
    if method == "auto":
        return "exact" if model.state_dim == 1 else "eis"
    if method == "eis" and model.transition_uses_data and not model.has_path_transition:
        raise SmleInputError(
            f"method = 'eis' is not available for model '{model.name}': its state's transition depends on the data "
            "(leverage) and the model gives it only on a grid (no path_transition hook, which EIS over two "
            "consecutive states needs); accepted for this model: 'exact' or 'auto'")
    if method == "exact" and model.state_dim != 1:
        raise SmleInputError(
            f"method = 'exact' needs a one-dimensional latent state; model '{model.name}' has a "
            f"{model.state_dim}-dimensional state, which no grid filter covers; accepted for this model: "
            "'eis' or 'auto'")
    return method


EIS_SETTINGS = ("n_draws", "seed", "antithetic", "tol", "max_iter", "n_seeds", "n_score_draws", "control_variates",
                "scoring")


def warn_unused_settings(model: Model, resolved: str, entry, given: dict) -> None:
    """Say (a UserWarning) which EIS settings a call to ``entry`` (``loglik`` or ``fit``) set away
    from its defaults that its method does not use: ``auto`` runs the exact method for a
    one-dimensional state, and a user who asked for 64 draws or a seed should not learn by accident
    that they were ignored. ``given``: the call's arguments by name (those in EIS_SETTINGS count)."""
    if resolved == "eis":
        return
    defaults = inspect.signature(entry).parameters
    changed = [name for name in EIS_SETTINGS if name in given and given[name] != defaults[name].default]
    if changed:
        warnings.warn(f"{', '.join(changed)} {'is' if len(changed) == 1 else 'are'} not used: model '{model.name}' "
                      f"is computed by the {resolved} method (method='auto' chooses it for a one-dimensional "
                      "state); pass method='eis' for the simulated likelihood with these settings",
                      UserWarning, stacklevel=3)


def check_exact_tol(exact_tol) -> float:
    if isinstance(exact_tol, bool) or not isinstance(exact_tol, (int, float)) or not 1e-12 <= exact_tol <= 1.0:
        raise SmleInputError(f"exact_tol = {exact_tol!r} is not accepted; accepted: a number in [1e-12, 1]")
    return float(exact_tol)


class ExactRun(NamedTuple):
    """The exact log-likelihood with its per-period parts.

    Attributes:
      loglik: log L.
      log_predictive: log p(y_t | y_1..y_{t-1}), shape (T,).
      filtered_mean, filtered_sd: moments of x_t given y_1..y_t, shape (T,).
      error_bound: an upper estimate of the error of ``loglik`` (0 for the Kalman filter, exact to
        rounding).
      grid_size: points of the grid (0: Kalman filter).
      engine: "Kalman filter" or "grid filter".
      spec: the grid used (None: Kalman filter).
    """

    loglik: float
    log_predictive: np.ndarray
    filtered_mean: np.ndarray
    filtered_sd: np.ndarray
    error_bound: float
    grid_size: int
    engine: str
    spec: ExactGrid | None

    @property
    def description(self) -> str:
        """"Kalman filter", or "grid filter (G points)"."""
        return self.engine if self.spec is None else f"grid filter ({self.grid_size} points)"


def is_linear_gaussian(model: Model) -> bool:
    """Whether the model states a Gaussian measurement (then the Kalman filter is its exact method)."""
    return type(model).gaussian_measurement is not Model.gaussian_measurement


def kalman_of(model: Model, params, y):
    """The Kalman filter of a linear Gaussian model at ``params`` (differentiable)."""
    return kalman_filter(y, model.latent(params), model.gaussian_measurement(params))


@functools.lru_cache(maxsize=None)
def _kalman(model: Model):
    return jax.jit(functools.partial(kalman_of, model))


@functools.lru_cache(maxsize=None)
def on_states(model: Model, hook: str = "log_obs_density"):
    """``(params, y, x) -> model.<hook>(params, prepared data, x)`` for states x of shape (T, S),
    compiled per shape: ``log_obs_density`` (log g_t), ``obs_cdf`` (F(y_t | x)) or
    ``period_transition`` (x a grid of shape (G,))."""
    method = getattr(model, hook)

    def run(params, y, x):
        return method(params, model.prepare(params, y), x)
    return jax.jit(run)


@functools.lru_cache(maxsize=None)
def _probe(model: Model):
    """``(params, y, x) -> (log g, curvature)`` for the grid choice, compiled per shape."""
    def run(params, y, x):
        return exact.log_g_and_curvature(lambda z: model.log_obs_density(params, model.prepare(params, y), z), x)
    return jax.jit(run)


def exact_run(model: Model, params, y, tol: float = EXACT_TOL, spec: ExactGrid | None = None,
              max_size: int = exact.SIZES[-1], progress=None) -> ExactRun:
    """The exact log-likelihood of ``model`` at ``params`` (JAX scalars by name) on ``y``; the grid
    has at most ``max_size`` points, ``progress`` hears of each grid run
    (:func:`smle.engine.exact.exact_filter`)."""
    y = jnp.asarray(y)
    if is_linear_gaussian(model):
        out = _kalman(model)(params, y)
        return ExactRun(float(out.loglik), np.asarray(_kalman_log_predictive(out)), np.asarray(out.filtered_mean),
                        np.sqrt(np.asarray(out.filtered_var)), 0.0, 0, "Kalman filter", None)
    log_g = on_states(model)
    out = exact.exact_filter(model.latent(params), lambda x: log_g(params, y, x), y.shape[0], tol, spec=spec,
                             curvature_probe=lambda x: _probe(model)(params, y, x),
                             transition=transition_of(model, params, y), max_size=max_size, progress=progress)
    return ExactRun(float(out.loglik), np.asarray(out.log_predictive), np.asarray(out.filtered_mean),
                    np.asarray(out.filtered_sd), float(out.error_bound), int(out.size), "grid filter", out.spec)


def transition_of(model: Model, params, y):
    """grid -> the model's per-period transition (a model whose transition uses the data), or None."""
    if not model.transition_uses_data:
        return None
    return lambda grid: on_states(model, "period_transition")(params, jnp.asarray(y), grid)


def _kalman_log_predictive(out):
    return -0.5 * (math.log(2 * math.pi) + jnp.log(out.innovation_var) + out.innovation**2 / out.innovation_var)


def log_g_on(model: Model, params, y, spec: ExactGrid) -> jax.Array:
    """log g_t(y_t | x_i) on the grid of ``spec``, shape (T, G)."""
    y = jnp.asarray(y)
    return on_states(model)(params, y, jnp.broadcast_to(spec.points(), (y.shape[0], spec.size)))


def smoothed_band(model: Model, params, y, run: ExactRun, levels=(0.05, 0.95)):
    """``(mean, lower, upper)`` of x_t given all data, each (T,), from the exact filter's run."""
    if run.spec is None:
        mean, var = kalman_smoother(jnp.asarray(y), model.latent(params), model.gaussian_measurement(params))
        from scipy.stats import norm  # the Gaussian quantiles of the smoothed law
        sd = np.sqrt(np.asarray(var))
        return np.asarray(mean), np.asarray(mean) + norm.ppf(levels[0]) * sd, np.asarray(mean) + norm.ppf(levels[-1]) * sd
    from smle.engine.exact_smoothing import smooth
    moves = transition_of(model, params, y)
    out = smooth(model.latent(params), log_g_on(model, params, y, run.spec), run.spec,
                 None if moves is None else moves(run.spec.points()), levels=tuple(levels))
    return np.asarray(out.mean), np.asarray(out.lower), np.asarray(out.upper)


# ---------------------------------------------------------------------------------------------
# a grid that moves with the parameters (estimation)


class MovingGrid(NamedTuple):
    """A grid fixed in units of the state's stationary law: points from ``mean + z_lower sd`` to
    ``mean + z_upper sd`` (``size`` and ``band`` static)."""

    z_lower: float
    z_upper: float
    size: int
    band: int

    @classmethod
    def of(cls, spec: ExactGrid, model: Model, params) -> "MovingGrid":
        state = model.latent(params)
        mean, sd = float(state.init_mean), math.sqrt(float(state.init_var))
        return cls((spec.lower - mean) / sd, (spec.upper - mean) / sd, spec.size, spec.band)


def moving_grid_loglik(model: Model, params, y, grid: MovingGrid) -> jax.Array:
    """log L on the grid ``grid`` placed at ``params``: smooth in ``params`` (use under jax.grad)."""
    state = model.latent(params)
    mean, sd = state.init_mean, jnp.sqrt(state.init_var)
    spec = ExactGrid(mean + sd * grid.z_lower, mean + sd * grid.z_upper, grid.size, grid.band)
    data = model.prepare(params, y)
    log_g = model.log_obs_density(params, data, jnp.broadcast_to(spec.points(), (y.shape[0], spec.size)))
    moves = model.period_transition(params, data, spec.points()) if model.transition_uses_data else None
    return exact.loglik_on_grid(state, log_g, spec, moves)


def kalman_loglik_of(model: Model, params, y) -> jax.Array:
    """The Kalman-filter log-likelihood of a linear Gaussian model (differentiable)."""
    return kalman_of(model, params, y).loglik
