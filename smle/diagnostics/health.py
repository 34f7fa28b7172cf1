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
* EIS convergence (iterations, last change, regression R^2 per period) and the periods whose
  log-weight terms drive the variance of the total log weight;
* the NSE against the number of draws S: under a finite weight variance the NSE falls as
  1/sqrt(S), so ``NSE sqrt(S)`` is flat; where it is not, the report says so;
* a verdict ('healthy', 'doubtful', 'unreliable') with the reasons in words.

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

import dataclasses
import functools
import json
import math
from pathlib import Path
from typing import Callable, Mapping, NamedTuple, Sequence

import jax
import jax.numpy as jnp
import numpy as np
from scipy import stats

from smle import likelihood
from smle.engine import eis
from smle.diagnostics import weight_tail
from smle.errors import SmleInputError, describe
from smle.results import CAUTION

MIN_SEEDS = 3
"""Fewest seeds :func:`check` accepts: a spread needs at least 2, and 3 gives a first idea."""

MIN_TAIL_DRAWS = 100
"""Fewest scoring draws for the tail fit: k-hat uses ceil(min(S/5, 3 sqrt(S))) >= 20 weights."""

FULL_TAIL_DRAWS = 2000
"""Scoring draws at which every threshold of ``weight_tail.DEFAULT_THRESHOLDS`` (down to 1%) has
at least ``weight_tail.MIN_EXCEEDANCES`` exceedances."""

NSE_LIMIT = 1.0
"""NSE (log units) above which comparisons of log-likelihoods are unreliable (common practice:
a likelihood-ratio statistic of a few units is then mostly simulation noise)."""

DEGENERATE_SPREAD = 1e-8
"""Largest minus smallest log weight below which the weights count as equal (rounding only)."""

AGREEMENT_LEVEL = 0.01
"""Two-sided level of the chi-square check of single-run NSE against the spread over seeds, and
of the F comparisons of NSE sqrt(S) across S."""

SCALING_MIN_SEEDS = 10
"""Fewest seeds (with at least 3 grid points) at which the NSE scaling enters the verdict; below,
the sd of each grid point is too noisy (about +-25% at 10 seeds) and the scaling is only reported."""

TOP_PERIODS = 10


class ScalingRow(NamedTuple):
    """The spread of log L_hat across seeds at one number of draws.

    Attributes:
      n_draws: S.
      sd: standard deviation of log L_hat across the seeds (the NSE of one run).
      scaled: ``sd * sqrt(S)``, flat in S under the 1/sqrt(S) law.
      scaled_low, scaled_high: 95% interval of ``scaled`` from the chi-square law of the
        sample variance of R normal values.
      single_nse: root mean square of the runs' own delta-method NSEs.
      consistent: whether ``scaled`` agrees with the value at the largest S (two-sided F test at
        ``AGREEMENT_LEVEL``).
    """

    n_draws: int
    sd: float
    scaled: float
    scaled_low: float
    scaled_high: float
    single_nse: float
    consistent: bool


class Period(NamedTuple):
    """A period's share of the variance of the total log weight (covariance share; shares sum to 1).

    Attributes:
      index: period number, 0-based.
      date: its date (or label) when the data has them, else ''.
      share: cov(term_t, log w) / var(log w) over the scoring draws.
      r_squared: R^2 of that period's final EIS regression.
    """

    index: int
    date: str
    share: float
    r_squared: float


@dataclasses.dataclass(frozen=True)
class HealthReport:
    """Everything :func:`check` measured.

    Attributes:
      model, model_options: the model's registry name and constructor options.
      params: the parameters checked (natural scale).
      n_periods: T; n_draws: S of the seed runs; n_seeds: R; seed: the base seed;
      antithetic, tol, max_iter: EIS settings.
      seeds: the seeds of the seed runs.
      values: log L_hat per seed, shape (R,); single_nse: each run's delta-method NSE, (R,).
      loglik_mean: mean of ``values``; loglik_sd: their standard deviation (the NSE of one run,
        from the spread); nse_of_mean: ``loglik_sd / sqrt(R)``; nse_single: root mean square
        of ``single_nse``; loglik_bias_corrected: ``loglik_mean + loglik_sd^2 / 2`` (Durbin
        and Koopman 1997: the log of a mean of weights is biased low by about NSE^2 / 2).
      nse_ratio: ``nse_single / loglik_sd``; nse_ratio_range: the range of the ratio under
        agreement (chi-square, two-sided ``AGREEMENT_LEVEL``).
      ess: effective sample size per seed run, (R,); iterations, converged, last_change: EIS
        convergence per seed run, (R,).
      r_squared: per-period R^2 of the final EIS regressions of the base seed run, (T,).
      tail_draws: scoring draws of the tail run; tail_scoring: how they were drawn.
      tail_ess: effective sample size of the tail run; tail_log_weights: its log weights.
      degenerate: all tail-run weights equal to rounding (an exact sampler).
      tail: the :class:`~smle.diagnostics.weight_tail.TailVerdict` of the tail run (None when degenerate).
      period_shares: each period's covariance share of var(log w) on the tail run, (T,).
      top_periods: the ``TOP_PERIODS`` largest shares as :class:`Period`.
      dates: labels of the periods (strings) or None.
      scaling: one :class:`ScalingRow` per S of the draws grid (empty when not measured).
      scaling_slope, scaling_slope_se: least-squares slope of log sd on log S (-1/2 under the
        1/sqrt(S) law) and its standard error (Var log sd ~ 1 / (2 (R - 1))).
      scaling_holds_from: smallest S of the grid from which every larger S is consistent
        with the largest (None when not measured).
      findings: one sentence per check.
      verdict: 'healthy', 'doubtful' or 'unreliable'; reason: the decisive findings in words.
      control_variates: the control variates of the seed and grid runs (None: none); with them,
        ``values``, ``loglik_sd`` and ``single_nse`` are of the corrected estimate, and
        values_uncorrected, loglik_sd_uncorrected: the plain EIS estimates of the same runs;
        variance_reduction: ``loglik_sd_uncorrected^2 / loglik_sd^2`` measured across seeds;
        variance_reduction_range: its rough 95% interval (the ratio read as F(R-1, R-1), as if
        the two spreads were independent);
        cv_coefficient_across_seeds: with the independent control, the coefficient minimising the
        spread across seeds, cov(plain, error) / var(error), and variance_reduction_at_best the
        factor it gives on the same seeds (optimistic: fitted and judged on the same runs).
    """

    model: str
    model_options: dict
    params: dict
    n_periods: int
    n_draws: int
    n_seeds: int
    seed: int
    antithetic: bool
    tol: float
    max_iter: int
    seeds: list
    values: np.ndarray
    single_nse: np.ndarray
    loglik_mean: float
    loglik_sd: float
    nse_of_mean: float
    nse_single: float
    loglik_bias_corrected: float
    nse_ratio: float
    nse_ratio_range: tuple
    ess: np.ndarray
    iterations: np.ndarray
    converged: np.ndarray
    last_change: np.ndarray
    r_squared: np.ndarray
    tail_draws: int
    tail_scoring: str
    tail_ess: float
    tail_log_weights: np.ndarray
    degenerate: bool
    tail: weight_tail.TailVerdict | None
    period_shares: np.ndarray
    top_periods: list
    dates: list | None
    scaling: list
    scaling_slope: float
    scaling_slope_se: float
    scaling_holds_from: int | None
    findings: list
    verdict: str
    reason: str
    control_variates: str | None = None
    values_uncorrected: np.ndarray | None = None
    loglik_sd_uncorrected: float = math.nan
    variance_reduction: float = math.nan
    variance_reduction_range: tuple = (math.nan, math.nan)
    cv_coefficient_across_seeds: float = math.nan
    variance_reduction_at_best: float = math.nan

    # -- conveniences ----------------------------------------------------------------------------
    @property
    def healthy(self) -> bool:
        return self.verdict == "healthy"

    @property
    def k_hat(self) -> float:
        """The Pareto k-hat of the tail run (nan when the weights are degenerate)."""
        return math.nan if self.tail is None else self.tail.k_hat.k_hat

    # -- serialisation ---------------------------------------------------------------------------
    def to_dict(self) -> dict:
        """A JSON-ready dictionary (arrays as lists, named tuples as dictionaries)."""
        out = {"format": "smle.check/1"}
        for field in dataclasses.fields(self):
            out[field.name] = _plain(getattr(self, field.name))
        out["caution"] = CAUTION
        return out

    def to_json(self, path=None) -> str:
        """JSON text of :meth:`to_dict`; optionally written to ``path``."""
        text = json.dumps(self.to_dict(), indent=1, allow_nan=True)
        if path is not None:
            Path(path).write_text(text)
        return text

    def figures(self, folder) -> list[Path]:
        """Write the four figures of the report into ``folder`` (created if needed)."""
        from smle.diagnostics import health_plots

        return health_plots.all_figures(self, folder)

    def write(self, folder) -> list[Path]:
        """Text summary, JSON and figures into ``folder``: the files written."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        (folder / "check.txt").write_text(self.summary() + "\n")
        self.to_json(folder / "check.json")
        return [folder / "check.txt", folder / "check.json", *self.figures(folder)]

    # -- text ------------------------------------------------------------------------------------
    def summary(self) -> str:
        """The report as plain text, in smle's own layout."""
        width = 78
        rule = "-" * width
        params = ", ".join(f"{k}={v:.6g}" for k, v in self.params.items())
        lines = [
            f"smle check  |  model {self.model}  |  {self.n_periods} periods  |  verdict: {self.verdict.upper()}",
            f"at {params}",
            rule,
            f"log-likelihood over {self.n_seeds} seeds ({self.n_draws} draws{', antithetic' if self.antithetic else ''})",
            f"  mean {self.loglik_mean:.4f}   spread (sd) {self.loglik_sd:.4f}   "
            f"range [{self.values.min():.4f}, {self.values.max():.4f}]",
            f"  NSE of one run: {self.loglik_sd:.4f} from the spread, {self.nse_single:.4f} from single-run "
            f"weights (ratio {self.nse_ratio:.2f}; agreement range {self.nse_ratio_range[0]:.2f}-"
            f"{self.nse_ratio_range[1]:.2f})",
            f"  NSE of the mean of the seeds {self.nse_of_mean:.4f}   bias-corrected mean "
            f"{self.loglik_bias_corrected:.4f}",
            f"  ESS per run: mean {self.ess.mean():.1f} of {self.n_draws} (min {self.ess.min():.1f})",
            *self._control_variate_lines(),
            rule,
            f"weight tail ({self.tail_draws} scoring draws, {self.tail_scoring}; ESS {self.tail_ess:.1f})",
        ]
        if self.degenerate:
            lines.append("  all weights are equal (to rounding): the sampler is exact, as for a linear Gaussian model;")
            lines.append("  there is no tail and the simulation error is zero")
        else:
            k = self.tail.k_hat
            lines.append(f"  Pareto k-hat {k.k_hat:.3f} from the largest {k.n_tail} weights   "
                         f"good below {k.good_below:.3f}; above 0.7 unreliable")
            if self.tail.tests:
                lines.append(f"  {'largest':>9}{'exceed.':>9}{'xi':>8}{'se':>7}{'Wald':>8}{'p':>8}{'LR':>8}{'p':>8}")
                for t in self.tail.tests:
                    lines.append(f"  {t.fraction:>8.0%} {t.fit.n_exceedances:>8d}{t.fit.xi:>8.3f}{t.fit.se_xi:>7.3f}"
                                 f"{t.wald:>8.2f}{t.wald_p_value:>8.3f}{t.lr:>8.2f}{t.lr_p_value:>8.3f}")
                lines.append("  H0: xi <= 1/2 (finite variance); one-sided p-values (Koopman, Shephard and Creal 2009)")
            else:
                lines.append(f"  no threshold leaves {weight_tail.MIN_EXCEEDANCES} exceedances: "
                             f"use at least {FULL_TAIL_DRAWS} tail draws for the tests")
            lines.append(f"  tail: {self.tail.verdict}")
        lines += [
            rule,
            f"EIS convergence: {int(self.converged.sum())} of {self.n_seeds} runs converged, iterations "
            f"{int(self.iterations.min())}-{int(self.iterations.max())}, largest last change "
            f"{self.last_change.max():.1e} (tolerance {self.tol:g})",
            f"  regression R^2 per period: min {self.r_squared.min():.3f} (period "
            f"{self._label(int(np.argmin(self.r_squared)))}), median {np.median(self.r_squared):.3f}",
        ]
        if not self.degenerate:
            lines.append("periods driving the variance of the log weight (share of var log w; R^2):")
            for p in self.top_periods:
                lines.append(f"  {self._label(p.index):>14}  {p.share:>7.1%}   R^2 {p.r_squared:.3f}")
        lines.append(rule)
        if self.scaling:
            lines.append(f"NSE against draws ({self.n_seeds} seeds each): NSE sqrt(S) is flat under 1/sqrt(S)")
            lines.append(f"  {'S':>6}{'NSE':>10}{'NSE sqrt(S)':>14}{'95% interval':>20}{'single-run':>12}")
            for row in self.scaling:
                mark = "" if row.consistent else "  <- off"
                lines.append(f"  {row.n_draws:>6d}{row.sd:>10.4f}{row.scaled:>14.3f}"
                             f"{f'[{row.scaled_low:.3f}, {row.scaled_high:.3f}]':>20}{row.single_nse:>12.4f}{mark}")
            lines.append(f"  log-log slope {self.scaling_slope:.3f} (se {self.scaling_slope_se:.3f}; 1/sqrt(S) "
                         f"gives -0.5); the scaling holds from S = {self.scaling_holds_from}")
            lines.append(rule)
        lines.append("findings:")
        lines += [f"  * {f}" for f in self.findings]
        lines += [rule, f"verdict: {self.verdict} -- {self.reason}", rule, CAUTION]
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()

    def _control_variate_lines(self) -> list[str]:
        if not self.control_variates:
            return []
        low, high = self.variance_reduction_range
        lines = [f"  control variates {self.control_variates!r}: spread {self.loglik_sd:.4f} with, "
                 f"{self.loglik_sd_uncorrected:.4f} without; variance reduction x{self.variance_reduction:.2f} "
                 f"(rough 95% interval {low:.2f}-{high:.2f})"]
        if math.isfinite(self.cv_coefficient_across_seeds):
            lines.append(f"  independent control: best coefficient across seeds {self.cv_coefficient_across_seeds:.3f}"
                         f" (reduction x{self.variance_reduction_at_best:.2f} on these seeds, optimistic; "
                         "loglik regresses it per run by default)")
        return lines

    def _label(self, index: int) -> str:
        if self.dates is not None:
            return f"{self.dates[index]}"
        return f"{index}"


def _plain(value):
    """JSON-ready form of a report field."""
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (np.floating, np.integer, np.bool_)):
        return value.item()
    if hasattr(value, "_asdict"):
        return {k: _plain(v) for k, v in value._asdict().items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    return value


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
        return likelihood.loglik(model, params, y, n_draws=n_draws, seed=seed, antithetic=settings.antithetic,
                                 tol=settings.tol, max_iter=settings.max_iter, n_score_draws=n_score_draws,
                                 control_variates=control_variates)
    except FloatingPointError as error:
        raise EstimatorBreakdown(
            f"verdict: unreliable -- the EIS log-likelihood is not finite at seed {seed} with {n_draws} draws"
            f"{f' ({n_score_draws} scoring draws)' if n_score_draws else ''}, so the estimator breaks down at "
            f"these parameters ({error})"
        ) from None


class EstimatorBreakdown(FloatingPointError):
    """The health check met a run with a non-finite estimate: the likelihood is unreliable there."""


@functools.lru_cache(maxsize=None)
def _period_terms_function(model):
    """Compiled ``(params, y, b_obs, c_obs, paths) -> per-period log-weight terms, (T, S)``."""

    def run(params, y, b_obs, c_obs, paths):
        data = model.prepare(params, y)
        sampler = eis.assemble(model.latent(params), eis.Auxiliary(b_obs, c_obs))
        log_obs = model.log_obs_density(params, data, paths)
        return (log_obs + sampler.weight_const[:, None] + sampler.weight_linear[:, None] * paths
                - 0.5 * sampler.weight_quadratic[:, None] * paths**2)

    return jax.jit(run)


def period_terms(model, params: Mapping, y, result: likelihood.LoglikResult) -> np.ndarray:
    """Per-period terms of the log weights of ``result``'s scoring paths, shape (T, S).

    ``log w = log chi_1 + sum_t term_t``: term_t is ``log g_t(x_t)`` minus the sampler's Gaussian
    kernel of period t (the chi_{t+1} integrating constant included), evaluated at the paths.
    """
    model, checked, y = likelihood.checked_inputs(model, params, y)
    params_jax = {k: jnp.asarray(v, float) for k, v in checked.items()}
    terms = _period_terms_function(model)(params_jax, jnp.asarray(y), jnp.asarray(result.b_obs),
                                          jnp.asarray(result.c_obs), jnp.asarray(result.paths))
    return np.asarray(terms)


def variance_shares(terms: np.ndarray) -> np.ndarray:
    """Covariance share of each period in the variance of the total log weight, shape (T,).

    ``share_t = cov(term_t, sum_s term_s) / var(sum_s term_s)`` across draws: the shares sum to
    one, a period with a large positive share moves the total log weight, a negative share damps it.
    """
    total = terms.sum(axis=0)
    centred_total = total - total.mean()
    variance = float(np.mean(centred_total**2))
    if variance <= 0.0:
        return np.zeros(terms.shape[0])
    covariance = (terms - terms.mean(axis=1, keepdims=True)) @ centred_total / terms.shape[1]
    return covariance / variance


def _chi2_sd_interval(sd: float, n: int, level: float) -> tuple[float, float]:
    """Interval for a normal sd from the sample sd of n values, two-sided at ``level``."""
    dof = n - 1
    low = sd * math.sqrt(dof / stats.chi2.ppf(1.0 - level / 2.0, dof))
    high = sd * math.sqrt(dof / stats.chi2.ppf(level / 2.0, dof))
    return low, high


# ---------------------------------------------------------------------------------------------
# Input checks


def _check_count(name: str, value, minimum: int, what: str, even: bool = False) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise SmleInputError(f"{name} = {describe(value)} is not accepted; accepted: an integer >= {minimum} ({what})")
    if even and value % 2:
        raise SmleInputError(f"{name} = {value} must be even with antithetic draws (pairs); "
                             "use an even number or antithetic=False")
    return int(value)


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
    return tuple(_check_count("draws_grid entry", s, likelihood.MIN_DRAWS, "draws per run", antithetic)
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
      n_draws: EIS draws per set of the runs being checked (as in :func:`smle.loglik`).
      n_seeds: R independent seeds for the spread (at least ``MIN_SEEDS``; 20 or more for
        a spread known to about +-16%).
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
      A :class:`HealthReport`.

    References:
      Durbin and Koopman (1997), Biometrika 84; Koopman, Shephard and Creal (2009),
      J. Econometrics 149; Vehtari et al. (2024), JMLR 25(72).
    """
    resolved, checked, y_array = likelihood.checked_inputs(model, params, y)
    settings = likelihood.check_settings(n_draws, antithetic, tol, max_iter)
    n_seeds = _check_count("n_seeds", n_seeds, MIN_SEEDS, "independent seeds for the spread; 20 or more is better")
    seed = _check_count("seed", seed, 0, "the base seed")
    tail_draws = _check_count(
        "tail_draws", tail_draws, MIN_TAIL_DRAWS,
        f"scoring draws for the Pareto tail fit; {FULL_TAIL_DRAWS} for the tests down to the largest 1%",
        antithetic)
    likelihood.check_control(resolved, control_variates)
    likelihood.check_settings(n_draws, antithetic, tol, max_iter, tail_draws)
    grid = _check_grid(draws_grid, antithetic)
    if not 0.0 < level < 1.0:
        raise SmleInputError(f"level = {describe(level)} is not accepted; accepted: a significance level in (0, 1)")
    labels = _resolve_dates(y, dates, y_array.shape[0])
    say = progress or (lambda text: None)
    seeds = list(range(seed, seed + n_seeds))
    runs: dict[tuple[int, int], _Run] = {}
    r_squared = None

    def seed_runs(draws: int) -> list[_Run]:
        nonlocal r_squared
        for s in seeds:
            if (draws, s) not in runs:
                result = _evaluate(resolved, checked, y_array, draws, s, settings, control_variates=control_variates)
                plain = result.value if result.value_uncorrected is None else result.value_uncorrected
                error = math.nan if result.independent_error is None else result.independent_error
                runs[draws, s] = _Run(result.value, result.nse, result.ess, result.iterations, result.converged,
                                      result.last_change, plain, error)
                if draws == settings.n_draws and s == seed:
                    r_squared = result.r_squared
        return [runs[draws, s] for s in seeds]

    say(f"seed runs: {n_seeds} seeds at {settings.n_draws} draws"
        + (f", control variates {control_variates!r}" if control_variates else ""))
    main = seed_runs(settings.n_draws)
    say(f"tail run: {tail_draws} scoring draws")
    tail_result = _evaluate(resolved, checked, y_array, settings.n_draws, seed, settings, n_score_draws=tail_draws)
    scaling_runs = {}
    for draws in grid:
        say(f"NSE scaling: {n_seeds} seeds at {draws} draws")
        scaling_runs[draws] = seed_runs(draws)
    say("assembling the report")
    return _report(resolved, checked, y_array, settings, seeds, main, r_squared, tail_result, tail_draws,
                   scaling_runs, labels, level, control_variates)


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
            level, control_variates) -> HealthReport:
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
        shares = variance_shares(period_terms(model, checked, y, tail_result))
    tail_r2 = np.asarray(tail_result.r_squared)
    order = np.argsort(-shares)[:TOP_PERIODS]
    top = [Period(int(i), labels[i] if labels else "", float(shares[i]), float(tail_r2[i])) for i in order]

    scaling, slope, slope_se, holds_from = _scaling(scaling_runs, n_seeds)

    findings, unreliable, doubtful = [], [], []
    # 1. the tail of the weights
    if degenerate:
        findings.append("all importance weights are equal (to rounding): the sampler is exact, as EIS is for a "
                        "linear Gaussian model, so the likelihood has no simulation error")
    else:
        text = f"weight tail {tail.verdict}: {tail.reason}"
        findings.append(text)
        {"unreliable": unreliable, "doubtful": doubtful}.get(tail.verdict, []).append(text)
        if tail_draws < FULL_TAIL_DRAWS:
            findings.append(f"tail run with {tail_draws} draws: the tests at the smallest thresholds need "
                            f"{FULL_TAIL_DRAWS} draws")
    # 2. the level of the NSE
    text = (f"NSE of one run from the spread over seeds is {sd:.3f} log units"
            f" ({'above' if sd > NSE_LIMIT else 'below'} {NSE_LIMIT:g}; common practice: above {NSE_LIMIT:g}, "
            "likelihood-ratio comparisons are mostly simulation noise)")
    findings.append(text)
    if sd > NSE_LIMIT:
        unreliable.append(text)
    # 3. single-run NSE against the spread (meaningless at rounding level, for an exact sampler)
    if degenerate:
        findings.append("single-run NSE and the spread over seeds are both rounding error only")
    elif sd > 0:
        agrees = ratio_range[0] <= ratio <= ratio_range[1]
        text = (f"single-run NSE {nse_single:.4f} {'agrees' if agrees else 'disagrees'} with the spread over "
                f"{n_seeds} seeds {sd:.4f} (ratio {ratio:.2f}; {1 - AGREEMENT_LEVEL:.0%} range for agreement "
                f"{ratio_range[0]:.2f}-{ratio_range[1]:.2f})")
        findings.append(text)
        if not agrees:
            doubtful.append(text + ("; the single-run NSE understates the error" if ratio < 1 else ""))
    else:
        text = "every seed gave the same log-likelihood although the weights differ"
        findings.append(text)
        doubtful.append(text)
    # 4. EIS convergence
    n_converged = sum(r.converged for r in main)
    text = (f"EIS converged in {n_converged} of {n_seeds} runs (iterations {min(r.iterations for r in main)}-"
            f"{max(r.iterations for r in main)}, largest last change {max(r.last_change for r in main):.1e})")
    findings.append(text)
    if n_converged < n_seeds:
        doubtful.append(text)
    # 5. scaling in S
    judged = bool(scaling) and not degenerate and n_seeds >= SCALING_MIN_SEEDS and len(scaling) >= 3
    if scaling and degenerate:
        findings.append("NSE against draws: rounding error only at every S (exact sampler)")
    elif scaling:
        steep = slope + 0.5
        z = steep / slope_se if slope_se > 0 else 0.0
        critical = stats.norm.ppf(1 - AGREEMENT_LEVEL / 2)
        text = (f"NSE falls with the draws with log-log slope {slope:.2f} (se {slope_se:.2f}; 1/sqrt(S) gives -0.5); "
                f"NSE sqrt(S) is flat from S = {holds_from}")
        if not judged:
            text += f" (reported, not judged: that needs at least {SCALING_MIN_SEEDS} seeds and 3 grid points)"
        findings.append(text)
        if judged and z > critical:
            doubtful.append(f"the NSE falls more slowly than 1/sqrt(S) (slope {slope:.2f}, se {slope_se:.2f}): "
                            "a sign of an infinite weight variance")
        elif judged and holds_from is not None and settings.n_draws < holds_from:
            doubtful.append(f"at {settings.n_draws} draws the NSE is not yet in its 1/sqrt(S) regime "
                            f"(that starts at S = {holds_from} on the grid)")
    if unreliable:
        verdict, reason = "unreliable", "; ".join(unreliable + doubtful)
    elif doubtful:
        verdict, reason = "doubtful", "; ".join(doubtful)
    else:
        verdict = "healthy"
        reason = ("the weights are equal (exact sampler)" if degenerate else
                  f"no sign of an infinite weight variance, NSE {sd:.3f} from {n_seeds} seeds agrees with the "
                  "single-run NSE, EIS converged")
        if judged:
            reason += ", and the NSE falls as 1/sqrt(S)"
    return HealthReport(
        model=model.name, model_options={f: getattr(model, f) for f in getattr(model, "__dataclass_fields__", {})},
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
        reason=reason,
    )


def _scaling(scaling_runs: dict, n_seeds: int):
    """Rows of the NSE-against-S table, the log-log slope with its se, and where the scaling holds."""
    if not scaling_runs:
        return [], math.nan, math.nan, None
    draws = sorted(scaling_runs)
    sds = {s: float(np.std([r.value for r in scaling_runs[s]], ddof=1)) for s in draws}
    dof = n_seeds - 1
    f_low, f_high = stats.f.ppf([AGREEMENT_LEVEL / 2, 1 - AGREEMENT_LEVEL / 2], dof, dof)
    reference = sds[draws[-1]] * math.sqrt(draws[-1])
    rows = []
    for s in draws:
        scaled = sds[s] * math.sqrt(s)
        low, high = _chi2_sd_interval(scaled, n_seeds, 0.05)
        consistent = reference == 0.0 and scaled == 0.0 or (
            reference > 0 and f_low <= (scaled / reference) ** 2 <= f_high)
        single = float(np.sqrt(np.mean([r.nse**2 for r in scaling_runs[s]])))
        rows.append(ScalingRow(s, sds[s], scaled, low, high, single, bool(consistent)))
    holds_from = draws[-1]
    for row in reversed(rows):
        if not row.consistent:
            break
        holds_from = row.n_draws
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
