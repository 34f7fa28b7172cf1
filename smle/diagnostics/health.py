"""The health check of a simulated likelihood: how noisy it is and whether its variance exists.

:func:`check` evaluates the EIS log-likelihood of a model at fixed parameters many times and
reports, in a :class:`HealthReport`:

* the spread of ``log L_hat`` across R independent seeds: mean, standard deviation (the
  numerical standard error, NSE, of one run measured directly), the NSE of the mean, the
  single-run delta-method NSE beside it, and the bias-corrected value ``+ NSE^2 / 2``
  (Durbin and Koopman 1997);
* the effective sample size, and the tail of the largest importance weights on a large scoring
  set: generalised Pareto shape with the Wald and likelihood-ratio tests of H0: xi <= 1/2
  (finite variance) of Koopman, Shephard and Creal (2009) at several thresholds, and the
  Pareto-smoothed k-hat with the sample-size threshold of Vehtari et al. (2024);
* where an exact log-likelihood exists, each seed's actual error against it (computed once,
  :mod:`smle.diagnostics.health_exact`): bias, RMSE, the ratio of the RMSE to the reported NSE and
  the standardised errors, with chi-square and t tests of an honest, unbiased NSE. A
  one-dimensional state always has one; of the k-dimensional states, a linear Gaussian one
  (``var1-noise``: the Kalman filter) and two independent AR(1) components (``sv-2factor``: the
  two-dimensional grid filter); for the others the report says that there is no exact reference
  and the check rests on the spread over seeds;
* EIS convergence (iterations, last change, regression R^2 per period) and the periods whose
  log-weight terms drive the variance of the total log weight;
* the NSE against the number of draws S: under a finite weight variance the NSE falls as
  1/sqrt(S), so ``NSE sqrt(S)`` is flat; where it is not, the report says so;
* a verdict ('healthy', 'doubtful', 'unreliable') with the reasons in words.

A state whose transition uses the data (``sv-leverage``: EIS with kernels over two consecutive
states, :mod:`smle.engine.eis_pairs`) is checked the same way, against its exact grid filter; its
per-period terms repeat the tail run from its seed (:func:`period_terms`), since a result keeps only
the x_t terms of the pair kernels. Control variates are not available for it.

Every random number derives from the ``seed`` argument: the seed runs use seeds
``seed, seed + 1, ..., seed + R - 1`` at every S, the tail run uses ``seed``.

References:
  Durbin, J. and Koopman, S. J. (1997). Monte Carlo maximum likelihood estimation for
  non-Gaussian state space models. Biometrika 84, 669-684.
  Koopman, S. J., Shephard, N. and Creal, D. (2009). Testing the assumptions behind
  importance sampling. Journal of Econometrics 149, 2-11.
  Vehtari, A., Simpson, D., Gelman, A., Yao, Y. and Gabry, J. (2024). Pareto smoothed
  importance sampling. Journal of Machine Learning Research 25(72), 1-58.
  Richard, J.-F. and Zhang, W. (2007). Efficient high-dimensional importance sampling.
  Journal of Econometrics 141, 1385-1411.
"""

from __future__ import annotations

import math
from typing import Callable, Mapping, NamedTuple, Sequence

import numpy as np
from scipy import stats

from smle.diagnostics import health_exact, health_findings, weight_tail
from smle.diagnostics.health_terms import period_terms, variance_shares
from smle.diagnostics.health_report import (  # noqa: F401 (the report's names are the check's too)
    AGREEMENT_LEVEL, DEGENERATE_SPREAD, FULL_TAIL_DRAWS, MIN_SEEDS, MIN_TAIL_DRAWS, NSE_LIMIT, SCALING_MIN_SEEDS,
    TOP_PERIODS, HealthReport, Period, ScalingRow,
)
from smle.errors import SmleInputError, describe
from smle.likelihood import loglik
from smle.models.base import model_options
from smle.validation import (
    MIN_DRAWS, check_control, check_integer, check_seed, check_settings, check_state_settings, checked_inputs,
)

# ---------------------------------------------------------------------------------------------
# Measurements


class _Run(NamedTuple):
    """What the report keeps of one seed run (the paths are dropped)."""

    value: float
    nse: float
    ess: float
    iterations: int
    converged: bool
    last_change: float
    value_uncorrected: float
    independent_error: float


def _evaluate(model, params, y, n_draws, seed, settings, n_score_draws=None, control_variates=None):
    """The one place the health check calls :func:`smle.loglik`.

    A run whose estimate is not finite ends the check with :class:`EstimatorBreakdown`: no report
    can be assembled from it, and the answer to the check is already known (unreliable).
    """
    try:
        return loglik(model, params, y, n_draws=n_draws, seed=seed, antithetic=settings.antithetic,
                                 tol=settings.tol, max_iter=settings.max_iter, n_score_draws=n_score_draws,
                                 control_variates=control_variates, on_breakdown="return",  # the check judges broken runs itself
                                 method="eis")
    except FloatingPointError as error:
        raise EstimatorBreakdown(
            f"verdict: unreliable -- the EIS log-likelihood is not finite at seed {seed} with {n_draws} draws"
            f"{f' ({n_score_draws} scoring draws)' if n_score_draws else ''}, so the estimator breaks down at "
            f"these parameters ({error})"
        ) from None


def _seed_run(model, params, y, n_draws, seed, settings, control_variates) -> tuple[_Run, np.ndarray]:
    """One seed run, as the report keeps it, and its per-period regression R^2."""
    result = _evaluate(model, params, y, n_draws, seed, settings, control_variates=control_variates)
    plain = result.value if result.value_uncorrected is None else result.value_uncorrected
    error = math.nan if result.independent_error is None else result.independent_error
    return _Run(result.value, result.nse, result.ess, result.iterations, result.converged, result.last_change,
                plain, error), result.r_squared


class EstimatorBreakdown(FloatingPointError):
    """The health check met a run with a non-finite estimate: the likelihood is unreliable there."""


def _chi2_sd_interval(sd: float, n: int, level: float) -> tuple[float, float]:
    """Interval for a normal sd from the sample sd of n values, two-sided at ``level``."""
    dof = n - 1
    low = sd * math.sqrt(dof / stats.chi2.ppf(1.0 - level / 2.0, dof))
    high = sd * math.sqrt(dof / stats.chi2.ppf(level / 2.0, dof))
    return low, high


# ---------------------------------------------------------------------------------------------
# Input checks


def _checked_arguments(model, params, y, n_draws, n_seeds, seed, tail_draws, draws_grid, dates, antithetic, tol,
                       max_iter, level, control_variates):
    """The arguments of :func:`check`, validated: ``(model, params, y, settings, n_seeds, seed,
    tail_draws, grid, labels)``."""
    resolved, checked, y_array = checked_inputs(model, params, y)
    settings = check_settings(n_draws, antithetic, tol, max_iter)
    check_state_settings(resolved, settings)
    n_seeds = check_integer("n_seeds", n_seeds, MIN_SEEDS, "independent seeds for the spread; 20 or more is better")
    seed = check_seed(seed, n_seeds)
    tail_draws = check_integer(
        "tail_draws", tail_draws, MIN_TAIL_DRAWS,
        f"scoring draws for the Pareto tail fit; {FULL_TAIL_DRAWS} for the tests down to the largest 1%",
        even=antithetic)
    check_control(resolved, control_variates)
    grid = _check_grid(draws_grid, antithetic)
    for draws in grid:  # a k-dimensional state's regression basis needs enough draws at every S
        check_state_settings(resolved, check_settings(draws, antithetic, tol, max_iter))
    check_settings(max((settings.n_draws, *grid)), antithetic, tol, max_iter, tail_draws, resolved, y_array.shape[0])
    if not 0.0 < level < 1.0:
        raise SmleInputError(f"level = {describe(level)} is not accepted; accepted: a significance level in (0, 1)")
    labels = _resolve_dates(y, dates, y_array.shape[0])
    return resolved, checked, y_array, settings, n_seeds, seed, tail_draws, grid, labels


def _check_grid(draws_grid, antithetic: bool) -> tuple[int, ...]:
    if draws_grid is None:
        return ()
    try:
        grid = sorted(set(draws_grid))
    except TypeError:
        raise SmleInputError(f"draws_grid = {describe(draws_grid)} is not accepted; accepted: a sequence of at "
                             "least 2 numbers of draws, e.g. (16, 32, 64, 128), or None to skip") from None
    if len(grid) < 2:
        raise SmleInputError(f"draws_grid = {describe(draws_grid)} has {len(grid)} distinct value(s); the NSE "
                             "scaling needs at least 2 (e.g. (16, 32, 64, 128)), or None to skip it")
    return tuple(check_integer("draws_grid entry", s, MIN_DRAWS, "draws per run", even=antithetic)
                 for s in grid)


def _resolve_dates(y, dates, n_periods: int) -> list | None:
    if dates is None:
        index = getattr(y, "index", None)
        try:
            import pandas as pd
        except ImportError:  # pragma: no cover - pandas is a dependency
            return None
        if isinstance(index, pd.DatetimeIndex):
            return [d.strftime("%Y-%m-%d") for d in index]
        return None
    labels = [str(d)[:10] if hasattr(d, "strftime") or isinstance(d, np.datetime64) else str(d) for d in dates]
    if len(labels) != n_periods:
        raise SmleInputError(f"dates has {len(labels)} entries; y has {n_periods} periods: pass one date per period")
    return labels


# ---------------------------------------------------------------------------------------------
# The check


def check(
    model,
    params: Mapping[str, float],
    y,
    n_draws: int = 64,
    n_seeds: int = 20,
    seed: int = 0,
    tail_draws: int = FULL_TAIL_DRAWS,
    draws_grid: Sequence[int] | None = (16, 32, 64, 128, 256),
    dates=None,
    antithetic: bool = True,
    tol: float = 1e-6,
    max_iter: int = 50,
    level: float = 0.05,
    control_variates: str | None = None,
    progress: Callable[[str], None] | None = None,
) -> HealthReport:
    """The health check of the EIS log-likelihood of ``model`` at ``params`` on ``y``.

    Args:
      model: a registered model name or a model instance.
      params: parameter values by name (natural parameterisation).
      y: observations, shape (T,) (or (T, n_series)); a pandas Series or DataFrame with a
        DatetimeIndex gives the periods their dates.
      n_draws: draws of both EIS sets of the runs checked: ``smle.loglik(n_draws=n_draws,
        n_score_draws=None, tol=tol, max_iter=max_iter)`` (not loglik's defaults: 32/512, 1e-2).
      n_seeds: R independent seeds for the spread (at least ``MIN_SEEDS``; 20 or more: +-16%).
      seed: base seed; the seed runs use ``seed .. seed + R - 1``, the tail run ``seed``.
      tail_draws: scoring draws of the tail run (at least ``MIN_TAIL_DRAWS`` for k-hat;
        ``FULL_TAIL_DRAWS`` for the tests at every threshold down to the largest 1%).
      draws_grid: numbers of draws at which the NSE is measured from R seeds (at least 2
        values), or None to skip that part. ``n_draws`` may be among them (its runs are shared).
      dates: one label per period, overriding the index of ``y``.
      antithetic, tol, max_iter: EIS settings, as in :func:`smle.loglik`.
      level: significance level of the tail tests.
      control_variates: None, "independent", "draws" or "both" (as in :func:`smle.loglik`): the seed
        and grid runs then use the corrected estimator, and the report adds the spread without
        the correction, the measured variance-reduction factor with a rough interval and, with the
        independent control, its best coefficient estimated across seeds.
      progress: called with one line of text at each stage.

    Returns:
      A :class:`HealthReport`. Where an exact log-likelihood exists (every one-dimensional state;
      see :func:`smle.diagnostics.health_exact.reference` for k > 1) it carries the seed runs
      measured against it (``report.exact``, computed once to
      ``health_exact.REFERENCE_TOL``), and the verdict uses them (see
      :mod:`smle.diagnostics.health_exact`).

    References:
      Durbin and Koopman (1997), Biometrika 84; Koopman, Shephard and Creal (2009),
      J. Econometrics 149; Vehtari et al. (2024), JMLR 25(72).
    """
    resolved, checked, y_array, settings, n_seeds, seed, tail_draws, grid, labels = _checked_arguments(
        model, params, y, n_draws, n_seeds, seed, tail_draws, draws_grid, dates, antithetic, tol, max_iter, level,
        control_variates)
    say = progress or (lambda text: None)
    seeds = list(range(seed, seed + n_seeds))
    runs: dict[tuple[int, int], tuple[_Run, np.ndarray]] = {}

    def seed_runs(draws: int) -> list[_Run]:
        for s in seeds:
            if (draws, s) not in runs:
                runs[draws, s] = _seed_run(resolved, checked, y_array, draws, s, settings, control_variates)
        return [runs[draws, s][0] for s in seeds]

    say(f"seed runs: {n_seeds} seeds at {settings.n_draws} draws"
        + (f", control variates {control_variates!r}" if control_variates else ""))
    main = seed_runs(settings.n_draws)
    say("exact reference: the log-likelihood without simulation, where there is one")
    reference = health_exact.reference(resolved, checked, y_array)
    say(f"tail run: {tail_draws} scoring draws")
    tail_result = _evaluate(resolved, checked, y_array, settings.n_draws, seed, settings, n_score_draws=tail_draws)
    scaling_runs = {}
    for draws in grid:
        say(f"NSE scaling: {n_seeds} seeds at {draws} draws")
        scaling_runs[draws] = seed_runs(draws)
    say("assembling the report")
    r_squared = runs[settings.n_draws, seed][1]
    return _report(resolved, checked, y_array, settings, seeds, main, r_squared, tail_result, tail_draws,
                   scaling_runs, labels, level, control_variates, reference)


def _control_variate_summary(main: list, n_seeds: int) -> dict:
    """Spread without the correction, variance-reduction factor with a rough F interval, best coefficient."""
    plain = np.array([r.value_uncorrected for r in main])
    corrected = np.array([r.value for r in main])
    sd_plain, sd_corrected = float(plain.std(ddof=1)), float(corrected.std(ddof=1))
    factor = sd_plain**2 / sd_corrected**2 if sd_corrected > 0 else math.inf
    # rough: treats the two spreads as independent, so that their variance ratio is F(R-1, R-1)
    f_low, f_high = stats.f.ppf([0.025, 0.975], n_seeds - 1, n_seeds - 1)
    out = dict(values_uncorrected=plain, loglik_sd_uncorrected=sd_plain, variance_reduction=float(factor),
               variance_reduction_range=(float(factor / f_high), float(factor / f_low)),
               cv_coefficient_across_seeds=math.nan, variance_reduction_at_best=math.nan)
    errors = np.array([r.independent_error for r in main])
    if np.all(np.isfinite(errors)) and errors.std() > 0:
        beta = float(np.cov(plain, errors)[0, 1] / np.var(errors, ddof=1))
        out["cv_coefficient_across_seeds"] = beta
        out["variance_reduction_at_best"] = float(np.var(plain, ddof=1) / np.var(plain - beta * errors, ddof=1))
    return out


def _report(model, checked, y, settings, seeds, main, r_squared, tail_result, tail_draws, scaling_runs, labels,
            level, control_variates, reference) -> HealthReport:
    """Assemble the measurements into the evidence, judge it (:mod:`~smle.diagnostics.health_findings`)
    and fill in the report."""
    n_seeds = len(seeds)
    values = np.array([r.value for r in main])
    single = np.array([r.nse for r in main])
    mean = float(values.mean())
    sd = float(values.std(ddof=1))
    nse_single = float(np.sqrt(np.mean(single**2)))
    ratio = nse_single / sd if sd > 0 else (1.0 if nse_single == 0 else math.inf)
    # under agreement sd / nse_single ~ sqrt(chi2_{R-1} / (R-1)), so the ratio's range is its inverse
    dof = n_seeds - 1
    ratio_range = (math.sqrt(dof / stats.chi2.ppf(1 - AGREEMENT_LEVEL / 2, dof)),
                   math.sqrt(dof / stats.chi2.ppf(AGREEMENT_LEVEL / 2, dof)))

    lw = np.asarray(tail_result.log_weights)
    degenerate = bool(np.ptp(lw) <= DEGENERATE_SPREAD)
    tail = None if degenerate else weight_tail.tail_verdict(lw, level=level)
    if degenerate:
        shares = np.zeros(y.shape[0])
    else:
        shares = variance_shares(period_terms(model, checked, y, tail_result, settings.tol, settings.max_iter))
    tail_r2 = np.asarray(tail_result.r_squared)
    order = np.argsort(-shares)[:TOP_PERIODS]
    top = [Period(int(i), labels[i] if labels else "", float(shares[i]), float(tail_r2[i])) for i in order]

    scaling, slope, slope_se, holds_from = _scaling(scaling_runs, n_seeds)
    exact_result, note = reference
    exact = None if exact_result is None else health_exact.compare(values, single, exact_result, note)
    findings, verdict, reason = health_findings.judge(health_findings.Evidence(
        n_seeds=n_seeds, n_draws=settings.n_draws, main=main, sd=sd, nse_single=nse_single, ratio=ratio,
        ratio_range=ratio_range, degenerate=degenerate, tail=tail, tail_draws=tail_draws, scaling=scaling,
        slope=slope, slope_se=slope_se, holds_from=holds_from, exact=exact, reference=note))
    return HealthReport(
        model=model.name, model_options=model_options(model),
        params=dict(checked), n_periods=int(y.shape[0]), n_draws=settings.n_draws,
        n_seeds=n_seeds, seed=seeds[0], antithetic=settings.antithetic, tol=settings.tol,
        max_iter=settings.max_iter, seeds=seeds, values=values, single_nse=single, loglik_mean=mean,
        loglik_sd=sd, nse_of_mean=sd / math.sqrt(n_seeds), nse_single=nse_single,
        loglik_bias_corrected=mean + 0.5 * sd**2, nse_ratio=float(ratio), nse_ratio_range=ratio_range,
        ess=np.array([r.ess for r in main]), iterations=np.array([r.iterations for r in main]),
        converged=np.array([r.converged for r in main]), last_change=np.array([r.last_change for r in main]),
        r_squared=np.asarray(r_squared), tail_draws=tail_draws,
        tail_scoring=f"sampler fitted on {settings.n_draws} draws",
        control_variates=control_variates,
        **(_control_variate_summary(main, n_seeds) if control_variates else {}),
        tail_ess=float(tail_result.ess), tail_log_weights=lw, degenerate=degenerate, tail=tail,
        period_shares=shares, top_periods=top, dates=labels, scaling=scaling, scaling_slope=slope,
        scaling_slope_se=slope_se, scaling_holds_from=holds_from, findings=findings, verdict=verdict,
        reason=reason, exact=exact, reference=note,
    )


def _flat_from(draws: list, intervals: dict) -> int:
    """Smallest S of the grid from which the printed 95% intervals of NSE sqrt(S) all share a value.

    Walking down from the largest S, the common part of the intervals shrinks; the first S whose
    interval misses it ends the flat stretch. So "flat from S" holds exactly when the intervals the
    report prints from that S on overlap one another.
    """
    common_low, common_high = intervals[draws[-1]]
    holds_from = draws[-1]
    for s in reversed(draws[:-1]):
        low, high = intervals[s]
        common_low, common_high = max(common_low, low), min(common_high, high)
        if common_low > common_high:
            break
        holds_from = s
    return holds_from


def _scaling(scaling_runs: dict, n_seeds: int):
    """Rows of the NSE-against-S table, the log-log slope with its se, and where the scaling holds."""
    if not scaling_runs:
        return [], math.nan, math.nan, None
    draws = sorted(scaling_runs)
    sds = {s: float(np.std([r.value for r in scaling_runs[s]], ddof=1)) for s in draws}
    dof = n_seeds - 1
    intervals = {s: _chi2_sd_interval(sds[s] * math.sqrt(s), n_seeds, 0.05) for s in draws}
    holds_from = _flat_from(draws, intervals)
    rows = []
    for s in draws:
        low, high = intervals[s]
        single = float(np.sqrt(np.mean([r.nse**2 for r in scaling_runs[s]])))
        rows.append(ScalingRow(s, sds[s], sds[s] * math.sqrt(s), low, high, single, s >= holds_from))
    positive = [s for s in draws if sds[s] > 0]
    if len(positive) >= 2:
        log_s = np.log(positive)
        log_sd = np.log([sds[s] for s in positive])
        centred = log_s - log_s.mean()
        slope = float(centred @ (log_sd - log_sd.mean()) / (centred @ centred))
        # Var(log sd) ~ 1 / (2 (R - 1)) for the sd of R normal values (delta method)
        slope_se = float(math.sqrt(1.0 / (2.0 * dof) / (centred @ centred)))
    else:
        slope, slope_se = math.nan, math.nan
    return rows, slope, slope_se, holds_from
