"""Simulated maximum likelihood: :func:`fit`.

The objective is minus the EIS log-likelihood per observation, in the unconstrained
parameterisation each model declares, with the auxiliary sampler re-fitted at every parameter
value and the common random numbers held fixed. Its gradient is exact: the EIS fixed point is
differentiated implicitly (see :mod:`smle.engine.eis`), and each evaluation starts the EIS
iteration from the previous evaluation's auxiliary parameters (half the iterations near the
estimate; the fixed point, so the objective, does not depend on the start). The optimiser is
L-BFGS (optax's two-loop recursion) with a weak Wolfe line search; every evaluation of the
objective and its gradient is one JIT-compiled program, compiled once per (model, settings, data
shape). Standard errors come from the inverse Hessian of minus the log-likelihood (central differences of the exact gradient), mapped to the
natural parameters by the delta method. A model without a latent state is fitted the same way
on its closed-form likelihood; ``fixed`` parameters are held through :mod:`smle.restricted`.

References: Richard and Zhang (2007), J. Econometrics 141 (EIS); Liu and Nocedal (1989),
Math. Programming 45 (L-BFGS); Durbin and Koopman (1997), Biometrika 84 (bias correction).
"""

from __future__ import annotations

import functools
import math
import sys
import time
from typing import Callable, Mapping

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine import eis
from smle.engine.control import ControlSpec, control_facts
from smle.engine.methods import compiled_closed_form, eis_evaluation
from smle.engine.posterior import path_quantiles
from smle.engine.sampler import FIT_DRAWS, FIT_MAX_ITER, FIT_TOL
from smle.errors import SmleInputError
from smle.exact_likelihood import EXACT_TOL, check_exact_tol, resolve_method, warn_unused_settings
from smle.fit_exact import exact_reference as fit_exact_reference
from smle.fit_exact import fit_exact
from smle.models import Model, get_model
from smle.models.base import model_options
from smle.optimizer import announce_compilation, hessian_by_differences, lbfgs
from smle.restricted import Restriction, check_fixed, estimates_at
from smle.results import FitResult, count_zero_returns, describe_data
from smle.validation import (
    as_key, check_control, check_integer, check_observations, check_settings, check_state_settings, checked_params,
)

NO_CONTROL = ControlSpec()



def objective(model: Model, settings: eis.EISSettings, y, key, control: ControlSpec = NO_CONTROL,
              restriction: Restriction | None = None) -> Callable:
    """Minus the EIS log-likelihood per observation as a function of the unconstrained vector
    (of the free parameters' coordinates with a ``restriction``).

    With control variates it is the corrected log-likelihood. Returns ``(value, aux)`` where
    ``aux`` carries the EIS output, weight diagnostics and the control-variate facts at that
    point (the scoring paths and weights give the smoothed factor at the optimum).

    ``warm``: auxiliary parameters to start the EIS iteration from (a fit passes its previous
    evaluation's; None or NaN: the Newton start). The fixed point, so the value to the tolerance
    and the implicit gradient, does not depend on the start: the objective stays a function of
    the parameters (measured in experiments/results/bench_fit.md).
    """
    n_periods = y.shape[0]

    def negative_loglik(unconstrained, warm=None):
        params = model.from_real(unconstrained) if restriction is None else restriction.natural(unconstrained)
        out, extra = eis_evaluation(model, settings, control, params, y, key, warm)
        diagnostics = eis.weight_diagnostics(jax.lax.stop_gradient(out.log_weights), settings.antithetic)
        return -extra["value"] / n_periods, (out, diagnostics, jax.lax.stop_gradient(extra))

    return negative_loglik


@functools.lru_cache(maxsize=None)
def compiled_value_and_grad(model: Model, settings: eis.EISSettings, control: ControlSpec = NO_CONTROL,
                            restriction: Restriction | None = None):
    """``(u, y, key) -> ((value, aux), gradient)`` of :func:`objective`, compiled once per data shape.

    One compiled program serves the optimiser's every evaluation, its line search and the
    Hessian. (A fully traced optax L-BFGS loop inlines the objective three times, in the
    update, the line search and its start, and took three times as long to compile: 20 s
    against 6 s for sv at T = 2000.)
    """

    def run(u, y, key, warm=None):
        return jax.value_and_grad(objective(model, settings, y, key, control, restriction), has_aux=True)(u, warm)

    return jax.jit(run)


@functools.lru_cache(maxsize=None)
def compiled_closed_form_objective(restriction: Restriction):
    """``(u, y) -> (value, gradient)`` of minus the closed-form log-likelihood per observation in
    the free coordinates (the exact gradient, by JAX).

    The Hessian for the standard errors is taken by central differences of this exact gradient
    (2k more calls of the same program), not by ``jax.hessian``: compiling the second derivative
    of the variance scan took 20 s for NIG innovations and 8 s for normal ones at T = 500
    (against 8 s and 3.5 s for the gradient; cold cache, 2-core machine), and the differences
    reproduce the published benchmark standard errors to the digits quoted.
    """
    loglik = compiled_closed_form(restriction.model)

    def negative(u, y):
        return -loglik(restriction.natural(u), y) / y.shape[0]

    return jax.jit(jax.value_and_grad(negative))


def check_fit_data(model: Model, y) -> np.ndarray:
    """Observation checks that matter for estimation, beyond :func:`check_observations`."""
    array = check_observations(model, y)
    flat = array.reshape(array.shape[0], -1)
    if np.any(np.ptp(flat, axis=0) == 0):
        raise SmleInputError(
            f"y is constant (every value is {flat[0, 0]!r}); a model cannot be estimated from a constant series"
        )
    return array


def fit(
    model,
    y,
    n_draws: int = FIT_DRAWS,
    seed: int = 0,
    start: Mapping[str, float] | None = None,
    antithetic: bool = True,
    tol: float = FIT_TOL,
    max_iter: int = FIT_MAX_ITER,
    max_steps: int = 200,
    gtol: float = 1e-6,
    n_seeds: int = 1,
    level: float = 0.95,
    verbose: bool = False,
    n_score_draws: int | None = None,
    control_variates: str | None = None,
    cv_coefficient="regression",
    fixed: Mapping[str, float] | None = None,
    source=None,
    dates=None,
    method: str = "auto",
    exact_tol: float = EXACT_TOL,
    exact_reference: bool = True,
) -> FitResult:
    """Estimate a model by maximum likelihood: exact where the latent state is one-dimensional
    (the grid filter or the Kalman filter, :mod:`smle.fit_exact`), simulated (EIS) where it has
    more dimensions or where ``method="eis"`` asks for it, and in closed form for a model without
    a latent state (``state_dim == 0``). The EIS settings are used by EIS only.

    Args:
      model: registered model name or instance.
      y: observations, shape (T,) or (T, n_series); returns in the unit the user gives.
      n_draws: EIS draws per set (fitting and scoring sets each have ``n_draws``).
      seed: the common random numbers derive from it; ``n_seeds > 1`` refits with seeds
        ``seed + 1, ...`` to measure the simulation error of the estimates.
      start: start values by parameter name (default: the model's, from the data).
      antithetic: antithetic EIS draws.
      tol, max_iter: EIS convergence tolerance and iteration cap at every evaluation.
      max_steps: cap on L-BFGS steps.
      gtol: convergence when the largest gradient component of minus the log-likelihood per
        observation, in the unconstrained parameterisation, is below this.
      n_seeds: number of independent fits for simulation standard errors (1: none).
      level: confidence level of the intervals.
      verbose: print optimiser progress to standard error (and, before a first compilation,
        that it is compiling and about how long it takes).
      n_score_draws: paths of the EIS scoring set, if not ``n_draws``.
      control_variates, cv_coefficient: maximise the control-variate corrected log-likelihood
        (see :func:`smle.loglik`); "independent" about doubles the cost of an evaluation.
        Not used by a model without a latent state (nor are the other EIS settings).
      fixed: parameters held at given values, e.g. ``{"ar1": 0.0, "rho": 0.0}`` (each strictly
        inside its admissible region); the others are estimated, and standard errors, intervals
        and the number of parameters in AIC and BIC are those of the free ones.
      source: what ``y`` is, kept in ``FitResult.data_source`` and said in the summary: a file
        name, or a mapping with keys ``file``, ``columns``, ``units``. A pandas Series or
        DataFrame ``y`` gives its column name(s), and its dates with a DatetimeIndex.
      dates: the date of each period (text or datetimes), kept in ``FitResult.dates``.
      method: "auto" (default: "exact" for a one-dimensional state, "eis" otherwise), "exact" or
        "eis" (see :func:`smle.loglik`). ``FitResult.eis["method"]`` says which ran.
      exact_tol: the accuracy of the exact log-likelihood (log-likelihood units).
      exact_reference: an EIS fit of a model with a one-dimensional state is measured against the
        exact likelihood: the exact value at its estimate, the exact maximum and the loss between
        them go into ``FitResult.eis`` (see :func:`smle.fit_exact.exact_reference`) and the summary.

    Returns:
      A :class:`~smle.results.FitResult`.
    """
    model = get_model(model)
    resolved = resolve_method(model, method)
    warn_unused_settings(model, resolved, fit, locals())
    exact_tol = check_exact_tol(exact_tol)
    y, data_source, dates = describe_data(y, source, dates)
    y = check_fit_data(model, y)
    settings = check_settings(n_draws, antithetic, tol, max_iter, n_score_draws, model, y.shape[0], "fit")
    control = check_control(model, control_variates, cv_coefficient) if model.state_dim else NO_CONTROL
    if model.state_dim > 1:
        check_state_settings(model, settings)
    n_seeds = check_integer("n_seeds", n_seeds, 1)
    if not (isinstance(level, float) and 0.5 <= level < 1):
        raise SmleInputError(f"level = {level!r} is not accepted; accepted: a number in [0.5, 1)")
    max_steps = check_integer("max_steps", max_steps, 1)
    restriction = Restriction.of(model, check_fixed(model, fixed))
    start_params = _start_values(model, start, y)
    key = as_key(seed, n_seeds)
    y_jax = jnp.asarray(y)
    started = time.perf_counter()
    if resolved == "closed form":
        result = _fit_closed_form(restriction, y, start_params, max_steps, gtol, level, verbose, started)
        return _with_data_facts(result, model, y, data_source, dates)
    if resolved == "exact":
        result = fit_exact(restriction, y, start_params, max_steps, gtol, level, verbose, started, exact_tol)
        return _with_data_facts(result, model, y, data_source, dates)
    if verbose:
        print(f"fitting '{model.name}' to {y.shape[0]} periods with {settings.n_draws} EIS draws",
              file=sys.stderr, flush=True)
    first = _fit_one(restriction, settings, control, y_jax, key, start_params, max_steps, gtol, verbose)
    extra = []
    for offset in range(1, n_seeds):
        if verbose:
            print(f"refit with seed {seed + offset} ({offset + 1}/{n_seeds})", file=sys.stderr, flush=True)
        extra.append(_fit_one(restriction, settings, control, y_jax, as_key(seed + offset), start_params, max_steps,
                              gtol, False))
    result = _assemble(restriction, settings, control, y, y_jax, key, seed, first, extra, start_params, level, started)
    if model.state_dim == 1 and exact_reference:
        try:
            result.eis.update(fit_exact_reference(restriction, y, result.params, result.loglik, max_steps, gtol, exact_tol))
        except SmleInputError as error:  # the grid cannot reach the accuracy here: say so, keep the fit
            result.eis["exact_reference_error"] = str(error)
    return _with_data_facts(result, model, y, data_source, dates)


def _with_data_facts(result: FitResult, model, y, data_source, dates) -> FitResult:
    """The result with what was fitted (``data_source``), its dates and its zero returns."""
    if data_source is not None:
        data_source["n_obs"] = result.n_obs
    result.data_source, result.dates, result.zero_returns = data_source, dates, count_zero_returns(model, y)
    return result


def _start_values(model, start, y) -> dict:
    if start is None:
        return model.start_params(y)
    try:
        return checked_params(model, start)
    except SmleInputError as error:
        raise SmleInputError(f"start values: {error}") from None


def _evaluator(restriction, settings, control, y, key, warm=None):
    """``u -> (value, aux, gradient)`` of the compiled objective. With a one-dimensional state each
    evaluation starts EIS from the auxiliary parameters of the previous one (``warm`` for the
    first; None: the Newton start), which cuts the iterations a small step needs."""
    compiled = compiled_value_and_grad(restriction.model, settings, control, restriction)
    if restriction.model.state_dim != 1:
        def evaluate(u):
            (value, aux), grad = compiled(jnp.asarray(u), y, key)
            return value, aux, grad

        return evaluate
    nan = jnp.full((y.shape[0],), jnp.nan)
    last = {"warm": eis.Auxiliary(nan, nan) if warm is None else warm}

    def evaluate_warm(u):
        (value, aux), grad = compiled(jnp.asarray(u), y, key, last["warm"])
        if np.isfinite(float(value)):
            last["warm"] = aux[0].auxiliary
        return value, aux, grad

    return evaluate_warm


def _fit_one(restriction, settings, control, y, key, start_params, max_steps, gtol, verbose):
    u0 = restriction.free_start(start_params)
    evaluate = _evaluator(restriction, settings, control, y, key)
    if verbose:
        model = restriction.model
        evaluate = announce_compilation(evaluate, (restriction, settings, control, y.shape), model.name,
                                        f"T = {y.shape[0]}, {settings.n_draws} draws")
    return lbfgs(evaluate, u0, int(max_steps), float(gtol), verbose)


def _fit_closed_form(restriction, y, start_params, max_steps, gtol, level, verbose, started):
    """Exact maximum likelihood of a model without a latent state: L-BFGS on the closed form,
    standard errors from its Hessian (central differences of the exact gradient)."""
    model = restriction.model
    value_and_grad = compiled_closed_form_objective(restriction)
    y_jax = jnp.asarray(y)

    def evaluate(u):
        value, grad = value_and_grad(jnp.asarray(u), y_jax)
        return value, None, grad

    if verbose:
        print(f"fitting '{model.name}' to {y.shape[0]} periods by its closed-form likelihood", file=sys.stderr)
    first = lbfgs(evaluate, restriction.free_start(start_params), int(max_steps), float(gtol), verbose)
    hessian = hessian_by_differences(evaluate, first["u"], y.shape[0])
    params, covariance, std_errors, conf_int, converged, message = estimates_at(restriction, first, hessian, level)
    loglik = -first["value"] * y.shape[0]
    path = np.asarray(_compiled_factor_path(model)({n: jnp.asarray(v) for n, v in params.items()}, y_jax))
    k = len(restriction.free_names)
    return FitResult(
        model=model.name, model_options=model_options(model), param_names=list(model.param_names), params=params,
        std_errors=std_errors, conf_int=conf_int, level=level, covariance=covariance, loglik=loglik, nse=0.0,
        n_obs=y.shape[0], aic=-2 * loglik + 2 * k, bic=-2 * loglik + k * math.log(y.shape[0]),
        converged=bool(converged), message=message, iterations=first["steps"], n_evaluations=first["evaluations"] + 2 * k,
        grad_norm=first["grad_norm"], elapsed_seconds=time.perf_counter() - started, start=dict(start_params),
        eis={"method": "closed form"}, factor_name=model.factor_name, smoothed_mean=path, smoothed_lower=path,
        smoothed_upper=path, log_weights=np.zeros(0), observations=np.array(y, dtype=float),
        fixed=restriction.fixed_values,
    )


@functools.lru_cache(maxsize=None)
def _compiled_factor_path(model):
    return jax.jit(model.factor_path)


def _assemble(restriction, settings, control, y, y_jax, key, seed, first, extra, start_params, level, started):
    model = restriction.model
    names = model.param_names
    n_periods = y.shape[0]
    warm = first["aux"][0].auxiliary if model.state_dim == 1 else None
    hessian = hessian_by_differences(_evaluator(restriction, settings, control, y_jax, key, warm), first["u"], n_periods)
    params, covariance, std_errors, conf_int, converged, message = estimates_at(restriction, first, hessian, level)

    out, diagnostics, cv_extra = first["aux"]
    log_weights = np.asarray(out.log_weights)
    weights = np.exp(log_weights - log_weights.max())
    weights /= weights.sum()
    smoothed_mean, lower, upper = _smoothed(np.asarray(out.paths), weights)
    loglik = float(cv_extra["value"])
    facts = control_facts(control, settings.antithetic, out, diagnostics["nse"], cv_extra)
    k = len(restriction.free_names)

    simulation_std_errors = None
    seed_estimates = None
    if extra:
        seed_estimates = [params] + [
            {n: float(v) for n, v in restriction.natural(jnp.asarray(e["u"])).items()} for e in extra
        ]
        simulation_std_errors = {n: float(np.std([s[n] for s in seed_estimates], ddof=1)) for n in names}

    return FitResult(
        model=model.name,
        model_options=model_options(model),
        param_names=list(names),
        params=params,
        std_errors=std_errors,
        conf_int=conf_int,
        level=level,
        covariance=covariance,
        loglik=loglik,
        nse=float(cv_extra["nse"]) if facts is not None else float(diagnostics["nse"]),
        n_obs=n_periods,
        aic=-2 * loglik + 2 * k,
        bic=-2 * loglik + k * math.log(n_periods),
        converged=bool(converged),
        message=message,
        iterations=first["steps"],
        n_evaluations=first["evaluations"] + 2 * k,
        grad_norm=first["grad_norm"],
        elapsed_seconds=time.perf_counter() - started,  # the Hessian and the smoothing included
        start=dict(start_params),
        eis={
            "n_draws": settings.n_draws,
            "antithetic": settings.antithetic,
            "seed": int(seed),
            "tol": settings.tol,
            "iterations": int(out.info.iterations),
            "converged": bool(out.info.converged),
            "last_change": float(out.info.last_change),
            "ess": float(diagnostics["ess"]),
            "min_r_squared": float(np.min(np.asarray(out.info.r_squared))),
            "n_score_draws": settings.score_draws,
            **_control_entries(facts),
        },
        factor_name=model.factor_name,
        smoothed_mean=smoothed_mean,
        smoothed_lower=lower,
        smoothed_upper=upper,
        log_weights=log_weights,
        simulation_std_errors=simulation_std_errors,
        seed_estimates=seed_estimates,
        observations=np.array(y, dtype=float),
        fixed=restriction.fixed_values,
    )


def _smoothed(paths: np.ndarray, weights: np.ndarray):
    """Posterior mean and 5%/95% quantiles per period from the weighted scoring paths: each of
    shape (T,), or (T, k) per component for paths of shape (T, S, k)."""
    mean = np.tensordot(paths, weights, axes=([1], [0]))
    if paths.ndim == 2:
        lower, upper = np.asarray(path_quantiles(paths, weights, (0.05, 0.95)))
        return mean, lower, upper
    bands = np.stack([np.asarray(path_quantiles(paths[..., j], weights, (0.05, 0.95))) for j in range(paths.shape[-1])],
                     axis=-1)
    return mean, bands[0], bands[1]


def _control_entries(facts) -> dict:
    """The control-variate entries of ``FitResult.eis`` (none without control variates)."""
    if facts is None:
        return {}
    return {k: v for k, v in facts._asdict().items() if v is not None}
