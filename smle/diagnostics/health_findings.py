"""The findings of a likelihood health check, one small function each, and the verdict.

Each finding reads the :class:`Evidence` the check measured and returns :class:`Finding` s: a
sentence for the report and, when it counts against the likelihood, a severity ('doubtful' or
'unreliable') with the words the verdict gives. Adding a finding is one function added to
:data:`FINDINGS` (plus the report's figures or text only if it draws or prints something new).
The thresholds and their sources are in :mod:`smle.diagnostics.health_report`.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy import stats

from smle.diagnostics.health_report import (
    AGREEMENT_LEVEL, FULL_TAIL_DRAWS, NSE_LIMIT, SCALING_MIN_SEEDS, log_units, scaling_statement,
)
from smle.diagnostics.health_exact import EXACT_SAMPLER_ERROR, ExactComparison
from smle.diagnostics.weight_tail import TailVerdict


class Evidence(NamedTuple):
    """What the findings judge (measured by :func:`smle.diagnostics.health.check`).

    Attributes:
      n_seeds: R; n_draws: S of the seed runs; main: the seed runs (value, nse, ess,
        iterations, converged, last_change each).
      sd: spread of log L_hat over the seeds; nse_single: root mean square single-run NSE;
        ratio: ``nse_single / sd``; ratio_range: its range under agreement.
      degenerate: all tail-run weights equal (exact sampler); tail: the tail verdict (None when
        degenerate); tail_draws: scoring draws of the tail run.
      scaling: rows of the NSE-against-S table (empty when not measured); slope, slope_se: the
        log-log slope and its se; holds_from: smallest S from which the scaling holds.
      exact: the seed runs against the exact log-likelihood (None: no exact reference);
        reference: how that reference was computed, or why there is none.
    """

    n_seeds: int
    n_draws: int
    main: list
    sd: float
    nse_single: float
    ratio: float
    ratio_range: tuple
    degenerate: bool
    tail: TailVerdict | None
    tail_draws: int
    scaling: list
    slope: float
    slope_se: float
    holds_from: int | None
    exact: ExactComparison | None = None
    reference: str = ""

    @property
    def scaling_judged(self) -> bool:
        """Whether the NSE scaling enters the verdict (enough seeds and grid points to judge it)."""
        return bool(self.scaling) and not self.degenerate and self.n_seeds >= SCALING_MIN_SEEDS \
            and len(self.scaling) >= 3


class Finding(NamedTuple):
    """One sentence of the report; with a severity, ``against`` is what the verdict says of it."""

    text: str
    severity: str | None = None
    against: str | None = None


def weight_tail_finding(e: Evidence) -> list[Finding]:
    """The tail of the importance weights (Koopman, Shephard and Creal 2009; Vehtari et al. 2024)."""
    if e.degenerate:
        return [Finding("all importance weights are equal (to rounding): the sampler is exact, as EIS is for a "
                        "linear Gaussian model, so the likelihood has no simulation error")]
    text = f"weight tail {e.tail.verdict}: {e.tail.reason}"
    severity = e.tail.verdict if e.tail.verdict in ("unreliable", "doubtful") else None
    out = [Finding(text, severity, text if severity else None)]
    if e.tail_draws < FULL_TAIL_DRAWS:
        out.append(Finding(f"tail run with {e.tail_draws} draws: the tests at the smallest thresholds need "
                           f"{FULL_TAIL_DRAWS} draws"))
    return out


def nse_level_finding(e: Evidence) -> list[Finding]:
    """The error of one run against ``NSE_LIMIT`` (common practice): its actual error (RMSE against
    the exact value) where there is an exact reference, else the spread over seeds."""
    if e.exact is not None:
        size, what = e.exact.rmse, "actual error of one run (RMSE against the exact value)"
    else:
        size, what = e.sd, "NSE of one run from the spread over seeds"
    text = (f"{what} is {size:.3f} log units ({'above' if size > NSE_LIMIT else 'below'} {NSE_LIMIT:g}; common "
            f"practice: above {NSE_LIMIT:g}, likelihood-ratio comparisons are mostly simulation noise)")
    return [Finding(text, "unreliable", text) if size > NSE_LIMIT else Finding(text)]


def exact_error_finding(e: Evidence) -> list[Finding]:
    """Is the reported NSE honest? The actual errors against the exact value, judged by the
    chi-square intervals of :mod:`smle.diagnostics.health_exact`: the pooled ratio RMSE / NSE above
    its range is 'unreliable' (on average the runs' error bars understate their errors); the
    standardised errors alone above it is 'doubtful' (single runs' error bars cannot be trusted,
    though pooled they hold). An exact sampler must match the reference to ``EXACT_SAMPLER_ERROR``."""
    x = e.exact
    if x is None:
        return [Finding(f"{e.reference}; the error is judged from the spread over seeds only")]
    if e.degenerate:
        worst = float(np.max(np.abs(x.errors)))
        if worst > EXACT_SAMPLER_ERROR:
            text = (f"the weights are equal (exact sampler) but EIS differs from the exact log-likelihood "
                    f"({e.reference}) by up to {worst:.3g}")
            return [Finding(text, "unreliable", text)]
        return [Finding(f"EIS equals the exact log-likelihood ({e.reference}) to {worst:.1e} at every seed")]
    low, high = x.honest_range
    text = (f"actual error against the exact log-likelihood ({e.reference}): RMSE {x.rmse:.4f} against the "
            f"reported NSE {log_units(x.nse)} (ratio {x.ratio:.2f}), errors over their own NSE: root mean square "
            f"{x.z_rms:.2f}; {1 - AGREEMENT_LEVEL:.0%} range for an honest NSE over {e.n_seeds} seeds "
            f"{low:.2f}-{high:.2f}")
    if x.understated:
        return [Finding(text, "unreliable", f"the reported NSE understates the actual error against the exact "
                                            f"value: RMSE {x.rmse:.3f} against NSE {log_units(x.nse)} (ratio {x.ratio:.2f}, "
                                            f"above the {high:.2f} that {e.n_seeds} seeds explain)")]
    if x.runs_understated:
        return [Finding(text, "doubtful", f"single runs' NSEs understate their own errors against the exact value "
                                          f"(error / NSE root mean square {x.z_rms:.2f}, above the {high:.2f} that "
                                          f"{e.n_seeds} seeds explain), which the pooled ratio {x.ratio:.2f} does not show")]
    if max(x.ratio, x.z_rms) < low:
        text += "; the reported NSE overstates the error (conservative)"
    return [Finding(text)]


def exact_bias_finding(e: Evidence) -> list[Finding]:
    """The mean error against the exact value, by Student's t with R - 1 dof (two-sided
    ``AGREEMENT_LEVEL``); a significant bias is 'doubtful'."""
    x = e.exact
    if x is None or e.degenerate:
        return []
    text = (f"bias against the exact value {x.bias:+.4f} (se {x.bias_se:.4f}, t {x.bias_t:.2f}; critical "
            f"{x.bias_critical:.2f}); the bias-corrected mean (+ sd^2 / 2) is off by {x.corrected_error:+.4f}")
    if not x.biased:
        return [Finding(text)]
    return [Finding(text, "doubtful", f"EIS is biased against the exact value: mean error {x.bias:+.3f} over "
                                      f"{e.n_seeds} seeds (t = {x.bias_t:.1f})")]


def nse_agreement_finding(e: Evidence) -> list[Finding]:
    """Single-run NSE against the spread (meaningless at rounding level, for an exact sampler)."""
    if e.degenerate:
        return [Finding("single-run NSE and the spread over seeds are both rounding error only")]
    if e.sd <= 0:
        text = "every seed gave the same log-likelihood although the weights differ"
        return [Finding(text, "doubtful", text)]
    low, high = e.ratio_range
    agrees = low <= e.ratio <= high
    text = (f"single-run NSE {e.nse_single:.4f} {'agrees' if agrees else 'disagrees'} with the spread over "
            f"{e.n_seeds} seeds {e.sd:.4f} (ratio {e.ratio:.2f}; {1 - AGREEMENT_LEVEL:.0%} range for agreement "
            f"{low:.2f}-{high:.2f})")
    if agrees:
        return [Finding(text)]
    return [Finding(text, "doubtful", text + ("; the single-run NSE understates the error" if e.ratio < 1 else ""))]


def convergence_finding(e: Evidence) -> list[Finding]:
    """EIS convergence over the seed runs."""
    n_converged = sum(r.converged for r in e.main)
    text = (f"EIS converged in {n_converged} of {e.n_seeds} runs (iterations {min(r.iterations for r in e.main)}-"
            f"{max(r.iterations for r in e.main)}, largest last change {max(r.last_change for r in e.main):.1e})")
    return [Finding(text, "doubtful", text) if n_converged < e.n_seeds else Finding(text)]


def scaling_finding(e: Evidence) -> list[Finding]:
    """The NSE against the number of draws: 1/sqrt(S) under a finite weight variance."""
    if not e.scaling:
        return []
    if e.degenerate:
        return [Finding("NSE against draws: rounding error only at every S (exact sampler)")]
    text = scaling_statement(e.scaling, e.slope, e.slope_se, e.holds_from)
    if not e.scaling_judged:
        text += f" (reported, not judged: that needs at least {SCALING_MIN_SEEDS} seeds and 3 grid points)"
        return [Finding(text)]
    z = (e.slope + 0.5) / e.slope_se if e.slope_se > 0 else 0.0
    if z > stats.norm.ppf(1 - AGREEMENT_LEVEL / 2):
        return [Finding(text, "doubtful", f"the NSE falls more slowly than 1/sqrt(S) (slope {e.slope:.2f}, "
                                          f"se {e.slope_se:.2f}): a sign of an infinite weight variance")]
    if e.holds_from is not None and e.n_draws < e.holds_from:
        return [Finding(text, "doubtful", f"at {e.n_draws} draws the NSE is not yet in its 1/sqrt(S) regime "
                                          f"(that starts at S = {e.holds_from} on the grid)")]
    return [Finding(text)]


FINDINGS = (weight_tail_finding, nse_level_finding, nse_agreement_finding, exact_error_finding, exact_bias_finding,
            convergence_finding, scaling_finding)
"""The findings, in the order the report lists them."""


def judge(e: Evidence) -> tuple[list[str], str, str]:
    """``(findings, verdict, reason)``: every finding's sentence, and the verdict with its reason."""
    findings = [f for finding in FINDINGS for f in finding(e)]
    unreliable = [f.against for f in findings if f.severity == "unreliable"]
    doubtful = [f.against for f in findings if f.severity == "doubtful"]
    if unreliable:
        verdict, reason = "unreliable", "; ".join(unreliable + doubtful)
    elif doubtful:
        verdict, reason = "doubtful", "; ".join(doubtful)
    else:
        verdict = "healthy"
        reason = ("the weights are equal (exact sampler)" if e.degenerate else
                  f"no sign of an infinite weight variance, NSE {e.sd:.3f} from {e.n_seeds} seeds agrees with the "
                  "single-run NSE, EIS converged")
        if e.exact is not None and not e.degenerate:
            reason += (f", the actual error against the exact value (RMSE {e.exact.rmse:.3f}) matches the reported "
                       "NSE and shows no bias")
        if e.scaling_judged:
            reason += f", and NSE sqrt(S) is flat from S = {e.holds_from}, which includes the {e.n_draws} draws checked"
    return [f.text for f in findings], verdict, reason
