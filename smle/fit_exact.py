"""Exact maximum likelihood for a model whose latent state is one-dimensional (``method="exact"``).

The objective is minus the exact log-likelihood per observation (:mod:`smle.exact_likelihood`):
the Kalman filter for a linear Gaussian model, else the grid filter on a grid that moves with the
parameters (fixed in units of the state's stationary law, so that the objective is smooth and
JAX differentiates it exactly). L-BFGS maximises it; at the estimate the grid is chosen and
checked afresh (:func:`smle.exact_likelihood.exact_run`), and if that grid differs from the one
the optimiser used by more than the accuracy asked for, the optimiser continues on the new grid
(at most :data:`MAX_GRID_PASSES` times). The log-likelihood reported is the checked one, with its
error bound. A transition that uses the data has a dense G x G kernel per period, so such a fit
keeps its grid within :data:`DENSE_FIT_MAX_SIZE` points and otherwise stops with where it was and
what to do (as the transition sd goes to 0 the grid needed grows like 1 / sd: sv-leverage with
|delta| -> 1, where the likelihood of some data sets rises towards the edge). Standard errors come from the Hessian by central differences of the exact
gradient, as for the closed form (:mod:`smle.fit`), and the smoothed factor with its 5%/95% band
from the backward pass on the grid (or the Kalman smoother): no simulation anywhere.

References: Kitagawa (1987), JASA 82; Kalman (1960); Liu and Nocedal (1989), Math. Programming 45.
"""

from __future__ import annotations

import functools
import math
import sys
import time

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine.exact import SIZES, GridOutgrown
from smle.errors import SmleInputError
from smle.exact_likelihood import (
    MovingGrid, exact_run, is_linear_gaussian, kalman_loglik_of, moving_grid_loglik, smoothed_band,
)
from smle.models.base import model_options
from smle.optimizer import announce_compilation, hessian_by_differences, lbfgs
from smle.restricted import Restriction, compiled_natural, estimates_at
from smle.results import FitResult

MAX_GRID_PASSES = 3
DENSE_FIT_MAX_SIZE = 1024
"""Largest grid of a fit whose transition uses the data (a dense G x G kernel per period, rebuilt in
the gradient): measured at T = 500 on a shared core, 2 s per evaluation at 512 points and 388 s
for one checked run on 4096; the cost grows like T G^2, so a fit on the largest grids would take
hours. A grid needing more than 1.5 times it stops the fit at once
(:class:`~smle.engine.exact.GridOutgrown`), a smaller excess after the accuracy check; for
sv-leverage with sigma_eta 0.12 the limit is near |delta| = 0.985 (1135 points needed at 0.99)."""
KALMAN = MovingGrid(0.0, 0.0, 0, 0)
"""The 'grid' of a linear Gaussian model: none (the Kalman filter)."""


@functools.lru_cache(maxsize=None)
def compiled_exact_objective(restriction: Restriction, size: int, band: int):
    """``(u, y, z) -> (value, gradient)`` of minus the exact log-likelihood per observation at the
    free coordinates ``u``, on the moving grid ``(z[0], z[1], size, band)`` (size 0: the Kalman
    filter). Compiled once per (restriction, grid size, band, data shape)."""
    model = restriction.model

    def negative(u, y, z):
        params = restriction.natural(u)
        if size == 0:
            value = kalman_loglik_of(model, params, y)
        else:
            value = moving_grid_loglik(model, params, y, MovingGrid(z[0], z[1], size, band))
        return -value / y.shape[0]

    return jax.jit(jax.value_and_grad(negative))


def _grid_of(run, model, params) -> MovingGrid:
    return KALMAN if run.spec is None else MovingGrid.of(run.spec, model, params)


def _evaluator(restriction, grid: MovingGrid, y, verbose):
    compiled = compiled_exact_objective(restriction, grid.size, grid.band)
    z = jnp.asarray([grid.z_lower, grid.z_upper])

    def evaluate(u):
        value, grad = compiled(jnp.asarray(u), y, z)
        return value, None, grad

    if verbose:
        what = "Kalman filter" if grid.size == 0 else f"{grid.size}-point grid"
        evaluate = announce_compilation(evaluate, ("exact", restriction, grid.size, grid.band, y.shape),
                                        restriction.model.name, f"T = {y.shape[0]}, exact ({what})")
    return evaluate


EDGE_FRACTION = 0.005
"""A parameter this close to a finite bound (as a fraction of its interval) is named in the message of
a fit stopped by its grid (the seed-9 replication of experiments/eis_pairs_recovery.py stopped at
delta = -0.9949, phi = 0.9856: delta is named, phi is not)."""


def _rounded(params) -> str:
    return ", ".join(f"{n}={float(v):.4g}" for n, v in params.items())


def _checked_run(model, params, y_jax, exact_tol, verbose=False):
    """:func:`exact_run` at ``params`` with the fit's grid limit (:data:`DENSE_FIT_MAX_SIZE` for a
    transition that uses the data); a grid beyond it stops the fit with what happened and what to do."""
    limit = DENSE_FIT_MAX_SIZE if model.transition_uses_data else SIZES[-1]
    try:
        say = (lambda text: print(f"    {text}", file=sys.stderr, flush=True)) if verbose else None
        return exact_run(model, params, y_jax, exact_tol, max_size=limit, progress=say)
    except SmleInputError as error:
        near = [f"{n} = {float(params[n]):.4g}" for n, c in model.constraints().items()
                if n in params and math.isfinite(c.upper - c.lower)
                and min(abs(float(params[n]) - c.lower), abs(c.upper - float(params[n]))) < EDGE_FRACTION * (c.upper - c.lower)]
        message = (
            f"the exact fit of '{model.name}' stopped at {_rounded(params)} (grid limit of the fit: {limit} points): "
            f"{error}. "
            + (f"The estimate is heading to the edge of the parameter space ({', '.join(near)}), where the state's "
               "transition sd shrinks towards zero (sv-leverage: |delta| -> 1): the likelihood of these data may rise "
               "towards that edge, its maximum then not inside the parameter space. " if near else "")
            + "What to do: hold the parameter at a value inside (fixed={name: value}), fit with method='eis' (no "
              "grid; its estimate then shows the edge and has no standard errors), or use more data")
        if isinstance(error, GridOutgrown):
            raise GridOutgrown(message, error.transition_sd, error.needed) from None
        raise SmleInputError(message) from None


def _maximise(restriction: Restriction, y_jax, u, run, max_steps, gtol, verbose, exact_tol):
    """L-BFGS from ``u`` on the grid of ``run`` (the checked run at ``u``), re-checking the grid at
    the estimate (see the module docstring). Returns the optimiser's record (steps and evaluations
    summed over the passes), the checked run at the estimate and the last evaluator."""
    model = restriction.model
    natural = compiled_natural(restriction)
    grid = _grid_of(run, model, natural(u))
    steps = evaluations = 0
    for _ in range(MAX_GRID_PASSES):
        evaluate = _evaluator(restriction, grid, y_jax, verbose)
        first = lbfgs(evaluate, u, int(max_steps), float(gtol), verbose)
        steps, evaluations = steps + first["steps"], evaluations + first["evaluations"]
        u = first["u"]
        at = natural(u)
        if verbose:
            print(f"  checking the grid at the estimate ({_rounded(at)})", file=sys.stderr, flush=True)
        run = _checked_run(model, at, y_jax, exact_tol, verbose)
        moved = abs(-first["value"] * y_jax.shape[0] - run.loglik)
        if grid.size == 0 or moved <= max(10 * exact_tol, 2 * run.error_bound):
            break
        grid = _grid_of(run, model, at)
        if verbose:
            print(f"  the checked grid at the estimate differs by {moved:.2e}: continuing on {grid.size} points",
                  file=sys.stderr, flush=True)
    return {**first, "steps": steps, "evaluations": evaluations}, run, evaluate


def fit_exact(restriction: Restriction, y: np.ndarray, start_params, max_steps, gtol, level, verbose, started,
              exact_tol: float) -> FitResult:
    """Exact maximum likelihood (see the module docstring); the arguments are :func:`smle.fit`'s."""
    model = restriction.model
    y_jax = jnp.asarray(y)
    n_periods = y.shape[0]
    u = restriction.free_start(start_params)
    run = _checked_run(model, compiled_natural(restriction)(u), y_jax, exact_tol)
    if verbose:
        engine = "the Kalman filter" if is_linear_gaussian(model) else "the exact grid filter"
        print(f"fitting '{model.name}' to {n_periods} periods by {engine}", file=sys.stderr, flush=True)
    first, run, evaluate = _maximise(restriction, y_jax, u, run, max_steps, gtol, verbose, exact_tol)
    steps, evaluations = first["steps"], first["evaluations"]
    hessian = hessian_by_differences(evaluate, first["u"], n_periods)
    params, covariance, std_errors, conf_int, converged, message = estimates_at(restriction, first, hessian, level)
    jax_params = {n: jnp.asarray(v) for n, v in params.items()}
    mean, lower, upper = smoothed_band(model, jax_params, y_jax, run)
    k = len(restriction.free_names)
    return FitResult(
        model=model.name, model_options=model_options(model), param_names=list(model.param_names), params=params,
        std_errors=std_errors, conf_int=conf_int, level=level, covariance=covariance, loglik=run.loglik, nse=0.0,
        n_obs=n_periods, aic=-2 * run.loglik + 2 * k, bic=-2 * run.loglik + k * math.log(n_periods),
        converged=bool(converged), message=message, iterations=steps, n_evaluations=evaluations + 2 * k,
        grad_norm=first["grad_norm"], elapsed_seconds=time.perf_counter() - started, start=dict(start_params),
        eis=exact_facts(run, exact_tol), factor_name=model.factor_name, smoothed_mean=mean, smoothed_lower=lower,
        smoothed_upper=upper, log_weights=np.zeros(0), observations=np.array(y, dtype=float),
        fixed=restriction.fixed_values,
    )


def exact_facts(run, exact_tol: float) -> dict:
    """The ``FitResult.eis`` entries of an exact fit: the method and how accurate it was."""
    return {"method": "exact", "engine": run.engine, "grid_size": run.grid_size, "error_bound": run.error_bound,
            "exact_tol": exact_tol}


def exact_reference(restriction: Restriction, y: np.ndarray, params: dict, fitted_loglik: float,
                    max_steps: int, gtol: float, exact_tol: float) -> dict:
    """An EIS fit measured against the exact likelihood (a one-dimensional state): the exact
    log-likelihood at the EIS estimate, the exact maximum (L-BFGS started from the EIS estimate)
    and its estimates. Entries of ``FitResult.eis``:

    * ``exact_loglik_at_estimate``: exact log L at the EIS estimate;
    * ``simulation_error``: the EIS value there minus the exact one (what the NSE should cover);
    * ``exact_max_loglik``, ``exact_estimates``: the exact maximum and where it is;
    * ``loss_against_exact``: exact maximum minus the exact value at the EIS estimate (>= 0 up to
      the optimisers' tolerance): the likelihood the simulation cost the estimate.
    """
    model = restriction.model
    y_jax = jnp.asarray(y)
    at = {n: jnp.asarray(v) for n, v in params.items()}
    run = _checked_run(model, at, y_jax, exact_tol)  # the exact fit's grid limit: minutes, not hours
    best, best_run, _ = _maximise(restriction, y_jax, restriction.free_start(params), run, max_steps, gtol, False,
                                  exact_tol)
    best_params = {n: float(v) for n, v in compiled_natural(restriction)(best["u"]).items()}
    return {
        "exact_loglik_at_estimate": run.loglik,
        "simulation_error": fitted_loglik - run.loglik,
        "exact_max_loglik": best_run.loglik,
        "exact_estimates": best_params,
        "loss_against_exact": best_run.loglik - run.loglik,
        "exact_engine": run.description,
    }
