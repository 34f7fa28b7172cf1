"""The public simulated likelihood: :func:`loglik`, :func:`simulate` and :class:`LoglikResult`.

``loglik`` validates its inputs (:mod:`smle.validation`), then calls one JIT-compiled kernel per
(model, settings, data shape) from :mod:`smle.engine.methods`; parameters, data values and seeds
are traced, so new values reuse the compiled program.
"""

from __future__ import annotations

import functools
import math
import warnings
from typing import Mapping

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine.control import control_facts
from smle.engine.methods import compiled_closed_form, compiled_particle_eis, eis_entry, uses_pairs
from smle.engine.particle_eis import RESAMPLE_THRESHOLD
from smle.engine.sampler import DRAWS, MAX_ITER, SCORE_DRAWS, TOL
from smle.errors import EISBreakdownError, SmleInputError
from smle.likelihood_result import LoglikResult  # noqa: F401  (public name of this module)
from smle.exact_likelihood import EXACT_TOL, check_exact_tol, exact_run, resolve_method, warn_unused_settings
from smle.models import get_model
from smle.pareto_tail import MIN_EXCEEDANCES, k_hat_tail_size, pareto_k_hat
from smle.validation import (
    as_key, check_control, check_periods, check_settings, check_state_settings, checked_inputs, checked_params,
    jax_params,
)


def loglik(
    model,
    params: Mapping[str, float],
    y,
    n_draws: int = DRAWS,
    seed=0,
    antithetic: bool = True,
    tol: float = TOL,
    max_iter: int = MAX_ITER,
    n_score_draws: int | None = SCORE_DRAWS,
    control_variates: str | None = None,
    cv_coefficient="regression",
    on_breakdown: str = "raise",
    method: str = "auto",
    exact_tol: float = EXACT_TOL,
    scoring: str = "auto",
) -> LoglikResult:
    """The log-likelihood of ``model`` at ``params`` on observations ``y``: exact where the latent
    state is one-dimensional, an EIS estimate with its measured error otherwise (see ``method``).

    Args:
      model: a registered model name (see ``smle.model_names()``) or a model instance.
      params: parameter values by name, in the model's natural parameterisation.
      y: observations, shape (T,) (or (T, n_series) for multi-series models).
      n_draws: simulated paths S of the fitting draw set (default 32).
      seed: non-negative integer or JAX PRNG key; the common random numbers derive from it.
      antithetic: pair each draw with its negation.
      tol: EIS iterates until the largest relative change of the auxiliary parameters is at
        most ``tol`` (default 1e-2: 3-5 iterations; ``converged`` and ``last_change`` report it).
      max_iter: cap on EIS iterations (default 50).
      n_score_draws: paths of the scoring set (default 512; None: ``n_draws``). Scoring is one
        pass, so a large scoring set is cheap. The defaults (``smle.engine.sampler.DRAWS``,
        ``SCORE_DRAWS``, ``TOL``, ``MAX_ITER``) were chosen by their error against the exact
        value: experiments/results/eis_accuracy.md.
      control_variates: None; "independent" (EIS at the parameters with the factor
        autocorrelation set to zero, with the same random numbers, corrected by its exact
        likelihood: closed form or adaptive Gauss-Hermite); "draws" (pooled Hermite statistics
        of the scoring normals, of known mean zero; coefficients by the same log-weight
        regression); or "both". ``value`` and ``nse`` are then the corrected estimate and its
        NSE (delta method on the corrected weights).
      cv_coefficient: coefficient of the independent control. "regression" (default): from the
        least-squares regression of this run's log weights (antithetic pair means) on the
        independent case's (same draws) and on the draw statistics; it tracks the coefficient
        that minimises the variance across seeds (experiments/results/control_variates.md). A number fixes it: 1.0 subtracts the
        independent case's error as it is, which at rho = 0.9 made the variance 7 times larger.
        (A regression of the weights themselves, not their logs, is thrown off by heavy tails.)
      on_breakdown: "raise" (default: see Raises) or "return": return the run as it is, with its
        measured NSE, ESS and ``failed_regressions`` (for diagnostics that study broken samplers).
      method: "auto" (default): "exact" where the latent state is one-dimensional, "eis" where it
        has more dimensions; "exact": the Kalman filter for a linear Gaussian model, else the grid
        filter of :mod:`smle.engine.exact` with its accuracy checked (a model with a
        k-dimensional state, k > 1, is refused); "eis": efficient importance sampling, with the
        settings above. The EIS settings are not used by the exact method.
      exact_tol: the accuracy the exact method must reach (log-likelihood units; the grid is
        refined until its error bound is below it).
      scoring: how the EIS sampler scores the likelihood (``method="eis"``). "auto" (default):
        "particles" for a state (of any dimension) whose transition does not use the data, without
        control variates and with ``on_breakdown="raise"``; "paths" otherwise, and also where
        particle scoring breaks down (``repairs`` then says why). "paths":
        importance weights of whole paths, ``log mean w`` over the ``n_score_draws`` scoring paths,
        a smooth function of the parameters (what ``smle.fit`` maximises). "particles": particle
        EIS (:mod:`smle.engine.particle_eis`; Scharth and Kohn 2016): the same sampler's
        per-period conditionals propagate ``n_score_draws`` particles (antithetic pairs with
        ``antithetic``), weighted each period by the sampler's incremental weight and resampled
        (systematic, from fixed uniforms) when the effective sample size of the carried weights
        falls below :data:`~smle.engine.particle_eis.RESAMPLE_THRESHOLD` of them; ``log L_hat`` is
        the sum of the log weighted means (L_hat unbiased for L) and ``nse`` the sum of the
        delta-method variances of the stretches between resamplings. Its error no longer grows
        through a heavy tail of the path weights: against the exact value, RMSE 0.030 and 0.066
        (sv, T = 2000 and 8000) and 0.038 and 0.082 (garch-mix), against 0.105, 0.64, 0.21 and
        1.27 for "paths", with sd / NSE 0.86-1.06 (experiments/results/particle_eis.md); with a
        k-dimensional state, RMSE 0.059 against 0.40 (sv-2factor, T = 8000) and 0.057 against 0.43
        (factor-sv, N = 2, T = 2000; experiments/results/particle_eis_multi.md). Resampling makes it
        a step function of the parameters, so it is for evaluation, not for fits (which score
        paths). A particle result has no paths: ``smoothed_mean`` and ``k_hat`` need "paths". Not
        with control variates, nor for a transition that uses the data.

    A model without a latent state (``state_dim == 0``, e.g. ``garch``) has its likelihood in
    closed form: the result is exact (``method`` "closed form", ``nse`` 0) whatever ``method``
    says, and the EIS settings are not used.

    Returns:
      A :class:`LoglikResult`.

    Raises:
      EISBreakdownError: the run broke down (failed regressions, a non-finite value, collapsed
        weights with an NSE above :data:`NSE_LIMIT`, or float64 rounding above
        :data:`ROUNDING_LIMIT`) and a repair with 4 times the draws did not help. Hard regions
        (measured in experiments/results/eis_robustness.md): sv and sv-t with sigma_eta above
        about 1.3 and |phi| not near 1 (the state's innovation swamps what one observation says, and
        the Gaussian kernels fit the skewed per-period posterior badly); data far from zero with
        a tiny noise scale (price levels with sd 1e-4).

    References:
      Richard and Zhang (2007), J. Econometrics 141; Durbin and Koopman (1997), Biometrika 84.
    """
    model, checked, y = checked_inputs(model, params, y)
    resolved = resolve_method(model, method)
    if scoring not in SCORINGS:
        raise SmleInputError(f"scoring = {scoring!r} is not accepted; accepted: 'auto', 'paths' (importance weights "
                             "of whole paths) or 'particles' (particle EIS, resampled)")
    warn_unused_settings(model, resolved, loglik, locals())
    # every argument is checked whichever method runs: a bad value is refused, not ignored
    settings = check_settings(n_draws, antithetic, tol, max_iter, n_score_draws, model, y.shape[0])
    key = as_key(seed)
    if on_breakdown not in ("raise", "return"):
        raise SmleInputError(f"on_breakdown = {on_breakdown!r} is not accepted; accepted: 'raise' or 'return'")
    exact_tol = check_exact_tol(exact_tol)
    if resolved == "closed form":
        return _closed_form_loglik(model, checked, y)
    if resolved == "exact":
        return _exact_loglik(model, checked, y, exact_tol)
    control = check_control(model, control_variates, cv_coefficient)
    check_state_settings(model, settings)
    repairs = ()
    if scoring == "particles" or (scoring == "auto" and particles_apply(model, control_variates, on_breakdown)):
        check_particles_apply(model, control_variates)
        try:
            return _particle_loglik(model, settings, checked, y, key, seed)
        except EISBreakdownError as error:
            if scoring == "particles":
                raise
            repairs = (f"particle scoring broke down ({error.reason}); scored by paths",)
    if on_breakdown == "return":
        out, diagnostics, extra = eis_entry(model, settings, control)(jax_params(checked), jnp.asarray(y), key)
        if not math.isfinite(float(extra["value"])):
            raise EISBreakdownError(f"the EIS log-likelihood of model '{model.name}' is not finite at params={checked}")
    else:
        try:
            out, diagnostics, extra, settings, path_repairs = _checked_run(model, settings, control, checked, y, key)
        except EISBreakdownError as error:
            if not repairs:
                raise
            raise EISBreakdownError(f"{repairs[0]}, and {error}") from None
        repairs = repairs + path_repairs
    value = float(extra["value"])
    facts = control_facts(control, settings.antithetic, out, honest_nse(diagnostics), extra)
    nse = float(extra["nse"]) if facts is not None else honest_nse(diagnostics)
    k_hat = scoring_k_hat(np.asarray(out.log_weights))
    trusted = k_hat is None or k_hat < K_HAT_UNTRUSTED
    nse_method = "control variates (delta method)" if facts is not None else NSE_METHOD
    if not trusted:
        nse_method += f" (not trusted: k-hat {k_hat:.2f} >= {K_HAT_UNTRUSTED:g})"
        warnings.warn(untrusted_nse_warning(model, nse, k_hat), UserWarning, stacklevel=2)
    return LoglikResult(
        value=value,
        nse=nse,
        ess=float(diagnostics["ess"]),
        iterations=int(out.info.iterations),
        converged=bool(out.info.converged),
        last_change=float(out.info.last_change),
        n_draws=settings.n_draws,
        antithetic=settings.antithetic,
        seed=seed if isinstance(seed, int) else -1,
        log_weights=np.asarray(out.log_weights),
        paths=np.asarray(out.paths),
        b_obs=np.asarray(out.auxiliary.b_obs),
        c_obs=np.asarray(out.auxiliary.c_obs),
        r_squared=np.asarray(out.info.r_squared),
        n_score_draws=settings.score_draws,
        **(facts._asdict() if facts is not None else {}),
        nse_method=nse_method,
        k_hat=k_hat,
        nse_trusted=trusted,
        repairs=repairs,
        nse_estimates={name: float(diagnostics[f"nse_{name}"]) for name in ("delta", "lognormal", "batches")},
        log_weight_sd=float(diagnostics["log_weight_sd"]),
        failed_regressions=int(getattr(out.info, "failed_regressions", 0)),
        damping_step=float(getattr(out.info, "step", 1.0)),
    )


SCORINGS = ("auto", "paths", "particles")
"""Accepted values of ``loglik(..., scoring=)``."""

PARTICLE_NSE_METHOD = "particles: delta method per stretch between resamplings, summed"
"""How :attr:`LoglikResult.nse` is computed with ``scoring="particles"``."""


def particles_apply(model, control_variates, on_breakdown) -> bool:
    """Whether ``scoring="auto"`` scores by particles (see :func:`loglik`)."""
    return not uses_pairs(model) and control_variates is None and on_breakdown == "raise"


def check_particles_apply(model, control_variates) -> None:
    """Refuse ``scoring="particles"`` where it is not available, naming what is accepted."""
    if uses_pairs(model):
        raise SmleInputError(f"scoring = 'particles' is not available for model '{model.name}', which has a "
                             "transition that uses the data (EIS over two consecutive states); accepted for this "
                             "model: scoring='paths'")
    if control_variates is not None:
        raise SmleInputError(f"control_variates = {control_variates!r} cannot be combined with scoring = 'particles'; "
                             "accepted: control_variates=None, or scoring='paths'")


def _particle_loglik(model, settings, checked, y, key, seed) -> LoglikResult:
    """``loglik(..., method="eis")`` scored by particles; raises :class:`EISBreakdownError` (with a
    ``reason``) where the run cannot be returned: a non-finite value, failed regressions in the last
    EIS iteration, float64 rounding above :data:`ROUNDING_LIMIT` or an NSE above :data:`NSE_LIMIT`."""
    out = compiled_particle_eis(model, settings, RESAMPLE_THRESHOLD)(jax_params(checked), jnp.asarray(y), key)
    value = float(out.value)
    failed, rounding, nse = int(getattr(out.info, "failed_regressions", 0)), float(out.rounding), float(out.nse_blocks)
    reason = ("the estimate is not finite" if not math.isfinite(value) else
              f"the last EIS regressions failed in {failed} periods" if failed else
              f"float64 rounding alone can move it by {rounding:.3g}" if not rounding <= ROUNDING_LIMIT else
              f"its NSE is {nse:.3g}" if not nse <= NSE_LIMIT else None)
    if reason is not None:
        error = EISBreakdownError(f"the particle EIS log-likelihood of model '{model.name}' cannot be trusted at "
                                  f"params={checked}: {reason}; " + (
                                      "for a one-dimensional state the grid filter (method='exact') gives the exact "
                                      "value" if model.state_dim == 1 else "scoring='paths' scores whole paths"))
        error.reason = reason
        raise error
    return LoglikResult(
        value=value, nse=float(out.nse_blocks), ess=float(out.mean_ess), iterations=int(out.info.iterations),
        converged=bool(out.info.converged), last_change=float(out.info.last_change), n_draws=settings.n_draws,
        antithetic=settings.antithetic, seed=seed if isinstance(seed, int) else -1,
        log_weights=np.asarray(out.final_log_weights), paths=np.zeros((y.shape[0], 0)),
        b_obs=np.asarray(out.auxiliary.b_obs), c_obs=np.asarray(out.auxiliary.c_obs),
        r_squared=np.asarray(out.info.r_squared), n_score_draws=settings.score_draws, nse_method=PARTICLE_NSE_METHOD,
        nse_estimates={"blocks": float(out.nse_blocks), "genealogy": float(out.nse_genealogy)},
        damping_step=float(getattr(out.info, "step", 1.0)), scoring="particles", resamplings=int(out.resamplings),
    )


NSE_METHOD = "largest of delta, lognormal, batches"
"""How :attr:`LoglikResult.nse` is computed without control variates (see :func:`honest_nse`)."""

NSE_LIMIT = 2.0
"""Above this NSE (log-likelihood units) after the repair, :func:`loglik` raises
:class:`~smle.errors.EISBreakdownError` instead of returning a value that is noise."""

ROUNDING_LIMIT = 0.05
"""Largest float64 rounding scale of the log weights (:attr:`EISOutput.rounding`) accepted."""

DRAW_REPAIR_FACTOR = 4
"""The repair of a broken-down run: this many times the fitting and scoring draws."""


def scoring_k_hat(log_weights: np.ndarray) -> float | None:
    """The Pareto k-hat of a run's scoring weights, or None: too few weights for the tail fit
    (fewer than 100: :func:`~smle.pareto_tail.pareto_k_hat` needs 20 exceedances), or weights that
    are all equal to rounding (an exact sampler, e.g. a linear Gaussian model, where there is no tail)."""
    if k_hat_tail_size(log_weights.size) < MIN_EXCEEDANCES or not np.ptp(log_weights) > 1e-8:
        return None
    return float(pareto_k_hat(log_weights).k_hat)


K_HAT_UNTRUSTED = 1.0
"""k-hat at and above which a result says its NSE is not trusted. Vehtari et al. (2024) call
k-hat above 0.7 unreliable for their regularised estimator; the plain ML fit used here is noisier,
and at 0.7 it flagged half the runs of garch-mix at T = 2000, whose flagged runs had honest NSEs,
so the flag is set where the fitted tail has no finite mean (experiments/results/nse_tail.md)."""


def untrusted_nse_warning(model, nse: float, k_hat: float) -> str:
    """The warning of a run whose NSE is not trusted (k-hat at or above :data:`K_HAT_UNTRUSTED`)."""
    remedy = ("method='exact' gives the exact value for this one-dimensional state" if model.state_dim == 1 else
              "more scoring draws (n_score_draws) lower the error, and smle.check measures its real spread over seeds")
    return (f"the EIS scoring weights of model '{model.name}' have a Pareto k-hat of {k_hat:.2f}, at or above "
            f"{K_HAT_UNTRUSTED:g}: their fitted tail has no finite mean, so the NSE {nse:.3g} likely understates the "
            f"error (designs whose runs had such k-hat: errors 1.7-2.1 times the NSE, experiments/results/nse_tail.md) and "
            f"the value is biased low by about NSE^2 / 2 or more; {remedy}")


def honest_nse(diagnostics) -> float:
    """The NSE reported: the largest of the delta-method, log-normal and between-batch estimates
    (:func:`smle.engine.eis.weight_diagnostics`). The delta method alone saturates at about 1
    when one weight dominates and understates heavy tails; the log-normal estimate does not
    saturate; the batch spread guards against log weights that are far from normal.
    (Measured: experiments/results/eis_accuracy.md.)"""
    return max(float(diagnostics[f"nse_{name}"]) for name in ("delta", "lognormal", "batches"))


def breakdown(out, diagnostics, extra) -> str | None:
    """Why a run cannot be returned (None if it can): a non-finite value, failed regressions in
    the last EIS iteration, or an NSE above :data:`NSE_LIMIT`."""
    if not math.isfinite(float(extra["value"])):
        return "the estimate is not finite"
    rounding = float(getattr(out, "rounding", 0.0))  # the scalar engine measures it
    if not rounding <= ROUNDING_LIMIT:
        return (f"float64 rounding alone can move it by {rounding:.3g} (the terms of the log weights are huge: data far "
                "from zero against a tiny noise scale; rescale the data)")
    failed = int(getattr(out.info, "failed_regressions", 0))
    if failed:
        return f"the last EIS regressions failed in {failed} periods (a collapsed or overflowing draw set)"
    nse = honest_nse(diagnostics)
    if not nse <= NSE_LIMIT:
        return (f"the weights have collapsed: NSE {nse:.3g} (log-weight sd {float(diagnostics['log_weight_sd']):.3g}, "
                f"ESS {float(diagnostics['ess']):.3g} of {out.log_weights.shape[0]}), so its error cannot be measured")
    return None


def _checked_run(model, settings, control, params, y, key):
    """Run the compiled EIS kernel; on a breakdown (:func:`breakdown`) repair once with
    :data:`DRAW_REPAIR_FACTOR` times the draws, then raise :class:`EISBreakdownError`.

    Returns ``(out, diagnostics, extra, settings_used, repairs)``."""
    inputs = (jax_params(params), jnp.asarray(y), key)
    out, diagnostics, extra = eis_entry(model, settings, control)(*inputs)
    reason = breakdown(out, diagnostics, extra)
    if reason is None:
        return out, diagnostics, extra, settings, ()
    if reason.startswith("float64 rounding"):  # more draws cannot help: the terms themselves are too large
        raise EISBreakdownError(f"the EIS log-likelihood of model '{model.name}' cannot be trusted at params={params}: "
                                f"{reason}")
    wider = settings._replace(
        n_draws=DRAW_REPAIR_FACTOR * settings.n_draws,
        n_score_draws=None if settings.n_score_draws is None else DRAW_REPAIR_FACTOR * settings.n_score_draws,
    )
    out, diagnostics, extra = eis_entry(model, wider, control)(*inputs)
    second = breakdown(out, diagnostics, extra)
    if second is None:
        return out, diagnostics, extra, wider, (f"{reason}; repaired with {wider.n_draws} draws",)
    raise EISBreakdownError(
        f"the EIS log-likelihood of model '{model.name}' cannot be trusted at params={params}: {reason}, and with "
        f"{wider.n_draws} draws {second}. EIS breaks down like this where the state's innovation is large against "
        "what one observation says about it (e.g. sv with sigma_eta above about 1.5) or the data scale is far from "
        "the parameters' (returns in percent?); for a one-dimensional state the grid filter "
        "(method='exact') gives the exact value"
    )


def _closed_form_loglik(model, checked, y) -> LoglikResult:
    """The exact log-likelihood of a model without a latent state, as a :class:`LoglikResult`."""
    value = float(compiled_closed_form(model)(jax_params(checked), jnp.asarray(y)))
    if not math.isfinite(value):
        raise FloatingPointError(f"the closed-form log-likelihood of model '{model.name}' is not finite at "
                                 f"params={checked} (check the data scale, e.g. returns in percent)")
    empty = np.zeros(0)
    return LoglikResult(value=value, nse=0.0, ess=math.nan, iterations=0, converged=True, last_change=0.0,
                        n_draws=0, antithetic=False, seed=-1, log_weights=empty, paths=np.zeros((y.shape[0], 0)),
                        b_obs=empty, c_obs=empty, r_squared=empty, method="closed form")


def _exact_loglik(model, checked, y, exact_tol) -> LoglikResult:
    """The exact log-likelihood of a model with a one-dimensional state, as a :class:`LoglikResult`."""
    run = exact_run(model, jax_params(checked), jnp.asarray(y), exact_tol)
    if not math.isfinite(run.loglik):
        raise SmleInputError(f"the exact log-likelihood of model '{model.name}' is not finite at params={checked} "
                             "(check the data scale, e.g. returns in percent)")
    empty = np.zeros(0)
    engine = run.description
    return LoglikResult(value=run.loglik, nse=0.0, ess=math.nan, iterations=0, converged=True, last_change=0.0,
                        n_draws=0, antithetic=False, seed=-1, log_weights=empty, paths=np.zeros((y.shape[0], 0)),
                        b_obs=empty, c_obs=empty, r_squared=empty, method="exact", nse_method="none (exact)",
                        error_bound=run.error_bound, exact_engine=engine, log_predictive=run.log_predictive,
                        filtered_mean=run.filtered_mean, filtered_sd=run.filtered_sd)


def simulate(model, params: Mapping[str, float], n_periods: int, seed=0):
    """Simulate ``n_periods`` observations and the latent path from ``model`` at ``params``.

    Returns:
      ``(y, x)`` as NumPy arrays: observations of shape (T,) or (T, n_series), latent path (T,)
      (or (T, k) for a k-dimensional state).
    """
    model = get_model(model)
    checked = checked_params(model, params)
    n_periods = check_periods(model, n_periods)
    y, x = _simulate_jit(model, jax_params(checked), n_periods, as_key(seed))
    return np.array(y), np.array(x)


@functools.partial(jax.jit, static_argnums=(0, 2))
def _simulate_jit(model, params, n_periods, key):
    return model.simulate(params, n_periods, key)
