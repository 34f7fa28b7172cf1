"""The report of a likelihood health check (:class:`HealthReport`): its fields, JSON form and text.

What the check measures and the references are in :mod:`smle.diagnostics.health`; how each
finding is judged is in :mod:`smle.diagnostics.health_findings`.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path
from typing import NamedTuple

import numpy as np
from scipy import stats

from smle.diagnostics import weight_tail
from smle import report_text as layout
from smle.models import model_title
from smle.results import CAUTION, low_ess_warning

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
of the test of the log-log slope of the NSE against S for -1/2."""

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
      consistent: whether S is in the flat stretch: its 95% interval and those of every larger S
        share a value (see ``scaling_holds_from``).
    """

    n_draws: int
    sd: float
    scaled: float
    scaled_low: float
    scaled_high: float
    single_nse: float
    consistent: bool


def scaling_statement(rows: list, slope: float, slope_se: float, holds_from: int) -> str:
    """What the NSE-against-S table shows, derived from its printed numbers (one sentence).

    Flat means both: the 95% intervals of NSE sqrt(S) over the whole grid share a value, and the
    log-log slope is within the two-sided ``AGREEMENT_LEVEL`` critical value of -1/2 in its se.
    """
    scaled = [r.scaled for r in rows]
    crit = float(stats.norm.ppf(1 - AGREEMENT_LEVEL / 2))
    z = (slope + 0.5) / slope_se if slope_se > 0 else 0.0
    slope_ok = math.isfinite(z) and abs(z) <= crit
    slope_text = (f"log-log slope {slope:.3f} (se {slope_se:.3f}) "
                  + (f"within {crit:.2f} se of -0.5" if slope_ok else f"{abs(z):.1f} se from -0.5"))
    span = f"NSE sqrt(S) runs from {min(scaled):.3f} to {max(scaled):.3f}"
    if holds_from == rows[0].n_draws:
        if slope_ok:
            return f"NSE sqrt(S) is flat over the grid: its 95% intervals share a value and the {slope_text}"
        return f"{span}; its 95% intervals share a value but the {slope_text}, so it is not flat"
    if holds_from == rows[-1].n_draws:
        return (f"{span} and is not flat: the 95% interval at S = {rows[-2].n_draws} misses the one at S = "
                f"{rows[-1].n_draws}; {slope_text}")
    return (f"{span}; its 95% intervals share a value only from S = {holds_from} on (flat from there); "
            f"{slope_text}")


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
      scaling_holds_from: smallest S of the grid from which the 95% intervals of NSE sqrt(S) all
        share a value (None when not measured); :func:`scaling_statement` says it in words.
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
      exact: the seed runs against the exact log-likelihood, a
        :class:`~smle.diagnostics.health_exact.ExactComparison` (errors per seed, bias, RMSE, RMSE /
        reported NSE, standardised errors, the bias-corrected mean's error); None where there is no
        exact reference. reference: how the exact value was computed, or why there is none (e.g.
        "no exact reference: 2-dimensional state").
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
    exact: NamedTuple | None = None
    reference: str = ""

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
        """The report as plain text, in smle's report layout (:mod:`smle.report_text`)."""
        params = ", ".join(f"{k}={v:.6g}" for k, v in self.params.items())
        return layout.render(
            layout.title("check", f"model {model_title(self.model, self.model_options)}", f"{self.n_periods} periods", f"verdict: {self.verdict}"),
            [layout.block("Parameters checked", [params]), self._spread_block(), self._exact_block(),
             self._tail_block(),
             self._convergence_block(), self._scaling_block(),
             layout.block("Findings", [f"- {f}" for f in self.findings]),
             layout.block("Verdict", [f"verdict: {self.verdict} -- {self.reason}"])],
            CAUTION)

    def _spread_block(self) -> list[str]:
        heading = (f"Log-likelihood over {self.n_seeds} seeds "
                   f"({self.n_draws} draws{', antithetic' if self.antithetic else ''})")
        low, high = self.nse_ratio_range
        return layout.block(heading, [
            layout.field("mean", f"{self.loglik_mean:.4f} (bias-corrected {self.loglik_bias_corrected:.4f}; "
                                 f"NSE of the mean {self.nse_of_mean:.4f})"),
            layout.field("spread (sd)", f"{self.loglik_sd:.4f}, range {self.values.min():.4f} to "
                                        f"{self.values.max():.4f}"),
            layout.field("NSE of one run", f"{self.loglik_sd:.4f} from the spread, {self.nse_single:.4f} from "
                                           f"single-run weights (ratio {self.nse_ratio:.2f}; agreement range "
                                           f"{low:.2f} to {high:.2f})"),
            layout.field("effective sample size", f"mean {self.ess.mean():.1f} of {self.n_draws} draws, "
                                                  f"lowest {self.ess.min():.1f}"),
            *low_ess_warning(float(self.ess.min()), self.n_draws, "draws", " (lowest run)"),
            *self._control_variate_lines(),
        ])

    def _exact_block(self) -> list[str]:
        x = self.exact
        if x is None:
            return layout.block("Against the exact log-likelihood", [f"{self.reference}: the error is judged from "
                                                                     "the spread over seeds"])
        errors = [f"{e:+.4f}" for e in x.errors]
        low, high = x.honest_range
        lines = [layout.field("exact value", f"{x.loglik:.4f} ({self.reference})"),
                 "error per seed: " + ", ".join(errors[:10]), *(["  " + ", ".join(errors[i:i + 10])
                                                                for i in range(10, len(errors), 10)])]
        if not self.degenerate:
            lines += [
                layout.field("bias (mean error)", f"{x.bias:+.4f} (se {x.bias_se:.4f}, t {x.bias_t:.2f}; "
                                                  f"{1 - AGREEMENT_LEVEL:.0%} critical value {x.bias_critical:.2f})"),
                layout.field("RMSE", f"{x.rmse:.4f} against the reported NSE {log_units(x.nse)}: ratio "
                                     f"{x.ratio:.2f}"),
                layout.field("error / own NSE", f"root mean square {x.z_rms:.2f} over the runs; {x.beyond_two_nse} "
                                                f"of {self.n_seeds} errors beyond twice their own NSE (honest: "
                                                "about 5%)"),
                f"  (an honest NSE keeps both within {low:.2f} to {high:.2f} over {self.n_seeds} seeds)",
                layout.field("bias-corrected mean", f"off by {x.corrected_error:+.4f}")]
        return layout.block("Against the exact log-likelihood", lines)

    def _tail_block(self) -> list[str]:
        heading = f"Weight tail ({self.tail_draws} scoring draws, {self.tail_scoring}; ESS {self.tail_ess:.1f})"
        if self.degenerate:
            return layout.block(heading, [
                "all weights are equal (to rounding): the sampler is exact, as for a linear Gaussian model;",
                "there is no tail and the simulation error is zero"])
        k = self.tail.k_hat
        severity, reading = weight_tail.k_hat_reading(k)
        lines = [layout.field("Pareto k-hat", f"{k.k_hat:.3f} from the largest {k.n_tail} weights"),
                 layout.field("limits", weight_tail.k_hat_limits(k)),
                 layout.field("reading", reading + (f" ({severity})" if severity else ""))]
        if self.tail.tests:
            lines.append("tests of H0: xi <= 1/2 (finite variance), one-sided (Koopman, Shephard and Creal 2009):")
            for t in self.tail.tests:
                lines.append(f"  largest {t.fraction:.0%} ({t.fit.n_exceedances} weights): xi {t.fit.xi:.3f} "
                             f"(se {t.fit.se_xi:.3f}); Wald {t.wald:.2f}, p {t.wald_p_value:.3f}; "
                             f"LR {t.lr:.2f}, p {t.lr_p_value:.3f}")
        else:
            lines.append(f"no threshold leaves {weight_tail.MIN_EXCEEDANCES} exceedances: "
                         f"use at least {FULL_TAIL_DRAWS} tail draws for the tests")
        lines.append(layout.field("tail", self.tail.verdict))
        return layout.block(heading, lines)

    def _convergence_block(self) -> list[str]:
        lines = [
            f"{int(self.converged.sum())} of {self.n_seeds} runs converged, iterations "
            f"{int(self.iterations.min())} to {int(self.iterations.max())}, largest last change "
            f"{self.last_change.max():.1e} (tolerance {self.tol:g})",
            layout.field("regression R^2 per period", f"lowest {self.r_squared.min():.3f} (period "
                         f"{self._label(int(np.argmin(self.r_squared)))}), median {np.median(self.r_squared):.3f}"),
        ]
        if not self.degenerate:
            lines.append("periods driving the variance of the log weight (share of var log w; R^2):")
            lines += [f"  {self._label(p.index)}: {p.share:.1%}, R^2 {p.r_squared:.3f}" for p in self.top_periods]
        return layout.block("EIS convergence", lines)

    def _scaling_block(self) -> list[str]:
        if not self.scaling:
            return []
        lines = []
        for row in self.scaling:
            mark = "" if row.consistent else "; before the flat stretch"
            lines.append(f"S = {row.n_draws}: NSE {row.sd:.4f}, NSE sqrt(S) {row.scaled:.3f} "
                         f"(95% interval {row.scaled_low:.3f} to {row.scaled_high:.3f}), single-run "
                         f"{row.single_nse:.4f}{mark}")
        lines.append(scaling_statement(self.scaling, self.scaling_slope, self.scaling_slope_se,
                                       self.scaling_holds_from))
        return layout.block(f"NSE against draws ({self.n_seeds} seeds each; 1/sqrt(S) makes NSE sqrt(S) flat)",
                            lines)

    def __str__(self) -> str:
        return self.summary()

    def _control_variate_lines(self) -> list[str]:
        if not self.control_variates:
            return []
        low, high = self.variance_reduction_range
        lines = [f"control variates {self.control_variates!r}: spread {self.loglik_sd:.4f} with, "
                 f"{self.loglik_sd_uncorrected:.4f} without; variance reduction x{self.variance_reduction:.2f} "
                 f"(rough 95% interval {low:.2f}-{high:.2f})"]
        if math.isfinite(self.cv_coefficient_across_seeds):
            lines.append(f"independent control: best coefficient across seeds {self.cv_coefficient_across_seeds:.3f}"
                         f" (reduction x{self.variance_reduction_at_best:.2f} on these seeds, optimistic; "
                         "loglik regresses it per run by default)")
        return lines

    def _label(self, index: int) -> str:
        if self.dates is not None:
            return f"{self.dates[index]}"
        return f"{index}"


def log_units(value: float) -> str:
    """A log-likelihood error in log units: 4 decimals, or 3 significant digits when it is huge."""
    return f"{value:.4f}" if abs(value) < 1e4 else f"{value:.3g}"


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
