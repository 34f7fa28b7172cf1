"""Figures of a likelihood health check (:class:`smle.diagnostics.health.HealthReport`), drawn off-screen.

The figures are ``matplotlib.figure.Figure`` objects saved to files, never pyplot figures: drawing
them leaves the caller's pyplot state and backend alone (a notebook keeps showing its own figures).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from smle.diagnostics.plots import time_axis

_INK, _ACCENT, _BAND, _EXACT = "#33506e", "#8c3b1e", "#e3a857", "#2e7d4f"
FILES = ("loglik_seeds.png", "weight_tail.png", "nse_scaling.png", "period_contributions.png")


def _figure(figsize) -> Figure:
    """A figure whose layout engine keeps labels, titles and outside legends from overlapping or
    being clipped (constrained layout, which also makes room for rotated date labels)."""
    return Figure(figsize=figsize, layout="constrained")


def _legend_below(axis, columns: int = 2) -> None:
    """The legend under the axes, outside them, so that it covers no point, bar or band."""
    axis.legend(fontsize=8, loc="upper center", bbox_to_anchor=(0.5, -0.2), ncols=columns, frameon=False)


def _save(figure, path) -> Path | Figure:
    """Write the figure to ``path``; with ``path=None``, hand the figure back (for inspection)."""
    if path is None:
        return figure
    figure.savefig(path, dpi=110)
    return Path(path)


def loglik_across_seeds(report, path) -> Path:
    """log L_hat per seed with its single-run NSE, the mean and the band mean +- one spread sd, and
    the exact log-likelihood as a line where there is one (the errors are the distances to it)."""
    figure = _figure((8, 4.6))
    axis = figure.subplots()
    seeds = np.asarray(report.seeds)
    axis.axhspan(report.loglik_mean - report.loglik_sd, report.loglik_mean + report.loglik_sd, color=_BAND,
                 alpha=0.35, label=f"mean +- sd over seeds ({report.loglik_sd:.3f})")
    axis.axhline(report.loglik_mean, color=_ACCENT, lw=1.0, label=f"mean {report.loglik_mean:.3f}")
    if report.exact is not None:
        axis.axhline(report.exact.loglik, color=_EXACT, lw=1.4, ls="--",
                     label=f"exact {report.exact.loglik:.3f} (RMSE {report.exact.rmse:.3f})")
    low, high, cut = _seed_axis_range(report)
    axis.errorbar(seeds, report.values, yerr=report.single_nse, fmt="o", ms=4, color=_INK, capsize=2,
                  label="one run +- its own NSE" + (f" (bars cut at the axes; largest {cut:.3g})" if cut else ""))
    axis.set_ylim(low, high)
    axis.xaxis.set_major_locator(MaxNLocator(integer=True))  # seeds are integers
    axis.set_xlabel("seed")
    axis.set_ylabel("log-likelihood estimate (natural log)")
    axis.set_title(f"EIS log-likelihood across {report.n_seeds} seeds ({report.model}, {report.n_draws} draws)")
    _legend_below(axis, 2 if report.exact is not None else 3)
    axis.grid(alpha=0.3)
    return _save(figure, path)


def _seed_axis_range(report) -> tuple[float, float, float]:
    """``(low, high, cut)``: y limits that show the points, the band, the exact value and the error
    bars, with bars longer than twice that span cut at the axes (``cut``: the largest NSE, when
    any is cut, else 0) so that one absurd NSE does not flatten every point onto a line."""
    values = np.asarray(report.values)
    marks = [values.min(), values.max(), report.loglik_mean - report.loglik_sd, report.loglik_mean + report.loglik_sd]
    if report.exact is not None:
        marks.append(report.exact.loglik)
    span = max(max(marks) - min(marks), 1e-12)
    nse = np.asarray(report.single_nse)
    shown = np.minimum(nse, 2.0 * span)
    low, high = min(min(marks), float((values - shown).min())), max(max(marks), float((values + shown).max()))
    pad = 0.05 * (high - low)
    return low - pad, high + pad, float(nse.max()) if np.any(nse > 2.0 * span) else 0.0


def weight_tail(report, path) -> Path:
    """Empirical survival function of the largest weights on log-log axes, with the fitted Pareto tail.

    A generalised Pareto tail with shape xi > 0 falls with slope -1/xi far out; the line of
    xi = 1/2 (slope -2), the edge of a finite variance, is drawn for comparison.
    """
    figure = _figure((7, 5))
    axis = figure.subplots()
    if report.degenerate:
        axis.text(0.5, 0.5, "all weights equal (exact sampler):\nno tail to show", ha="center", va="center",
                  transform=axis.transAxes)
        axis.set_axis_off()
        axis.set_title(f"Importance weights ({report.tail_draws} draws)")
        return _save(figure, path)
    lw = np.asarray(report.tail_log_weights)
    relative = np.sort(np.exp(lw - lw.max()))[::-1]
    n = relative.size
    keep = max(int(0.2 * n), 2)
    survival = np.arange(1, n + 1) / n
    axis.loglog(relative[:keep], survival[:keep], "o", ms=3, color=_INK, label=f"largest {keep} of {n} weights")
    k = report.tail.k_hat
    fit = k.fit
    threshold = relative[k.n_tail]
    fraction = k.n_tail / n
    grid = np.geomspace(threshold * (1 + 1e-6), relative[0], 200)
    excess = grid - threshold
    if abs(fit.xi) > 1e-9:
        base = np.maximum(1 + fit.xi * excess / fit.beta, 1e-300)
        tail = fraction * base ** (-1 / fit.xi)
    else:
        tail = fraction * np.exp(-excess / fit.beta)
    axis.loglog(grid, tail, color=_ACCENT, lw=1.4, label=f"fitted Pareto tail, k-hat = {fit.xi:.2f}")
    edge = fraction * (grid / threshold) ** -2.0
    axis.loglog(grid, edge, color="grey", ls="--", lw=1.0, label="xi = 1/2 (edge of finite variance)")
    axis.set_xlabel("weight relative to the largest weight (log scale)")
    axis.set_ylabel("fraction of draws at least this large (log scale)")
    axis.set_title(f"Tail of the importance weights ({report.tail.verdict}; {n} draws)")
    _legend_below(axis, 2)
    axis.grid(alpha=0.3, which="both")
    return _save(figure, path)


def nse_against_draws(report, path) -> Path:
    """NSE from the spread over seeds against S, and NSE sqrt(S), which is flat under 1/sqrt(S)."""
    figure = _figure((12, 5))
    left, right = figure.subplots(1, 2)
    if not report.scaling:
        for axis in (left, right):
            axis.text(0.5, 0.5, "not measured (draws_grid=None)", ha="center", va="center", transform=axis.transAxes)
            axis.set_axis_off()
        return _save(figure, path)
    draws = np.array([r.n_draws for r in report.scaling], float)
    sd = np.array([r.sd for r in report.scaling])
    single = np.array([r.single_nse for r in report.scaling])
    scaled = np.array([r.scaled for r in report.scaling])
    low = np.array([r.scaled_low for r in report.scaling])
    high = np.array([r.scaled_high for r in report.scaling])
    left.loglog(draws, np.maximum(sd, 1e-300), "o-", color=_INK, label="spread over seeds")
    left.loglog(draws, np.maximum(single, 1e-300), "s:", color=_ACCENT, ms=4, label="single-run NSE (rms)")
    left.loglog(draws, sd[-1] * np.sqrt(draws[-1] / draws), "--", color="grey", label="1/sqrt(S) through largest S")
    left.set_xlabel("draws S (log scale)")
    left.set_ylabel("NSE (log-likelihood units)")
    left.set_title(f"NSE against draws (slope {report.scaling_slope:.2f}; -0.5 expected)")
    _legend_below(left, 2)
    left.grid(alpha=0.3, which="both")
    right.errorbar(draws, scaled, yerr=[scaled - low, high - scaled], fmt="o-", color=_INK, capsize=3,
                   label="NSE sqrt(S) with 95% interval")
    right.axhline(scaled[-1], color="grey", ls="--", lw=1.0, label="value at the largest S")
    off = [not r.consistent for r in report.scaling]
    if any(off):
        right.plot(draws[off], scaled[off], "x", color=_ACCENT, ms=10, mew=2, label="before the flat stretch")
    right.set_xscale("log")
    right.set_xlabel("draws S (log scale)")
    right.set_ylabel("NSE x sqrt(S)")
    flat = report.scaling_holds_from
    right.set_title("Scaled NSE: " + ("flat over the grid" if flat == report.scaling[0].n_draws
                                      else f"intervals overlap from S = {flat}"))
    _legend_below(right, 2)
    right.grid(alpha=0.3)
    return _save(figure, path)


def period_contributions(report, path) -> Path:
    """Each period's share of the variance of the log weight, and the EIS regression R^2 per period."""
    figure = _figure((10, 6))
    top, bottom = figure.subplots(2, 1, sharex=True)
    t = np.arange(report.n_periods)
    top.vlines(t, 0, report.period_shares, color=_INK, lw=0.8)
    for p in report.top_periods[:5]:
        top.annotate(p.date or str(p.index), (p.index, p.share), fontsize=7, color=_ACCENT,
                     xytext=(3, 3), textcoords="offset points")
    top.axhline(0, color="grey", lw=0.6)
    top.set_ylabel("share of var(log weight)")
    top.set_title(f"Periods driving the weight variance ({report.tail_draws} scoring draws)"
                  + (": none, weights equal" if report.degenerate else ""))
    bottom.plot(t, report.r_squared, color=_ACCENT, lw=0.8)
    bottom.set_ylabel("EIS regression R^2")
    bottom.set_ylim(min(0.0, float(np.min(report.r_squared))), 1.02)
    time_axis(bottom, report.n_periods, report.dates)
    for axis in (top, bottom):
        axis.grid(alpha=0.3)
    return _save(figure, path)


_MAKERS = (loglik_across_seeds, weight_tail, nse_against_draws, period_contributions)


def draw_all(report) -> dict[str, Figure]:
    """The four figures of a health report as Figure objects, by file name, without writing them."""
    return {name: make(report, None) for make, name in zip(_MAKERS, FILES)}


def all_figures(report, folder) -> list[Path]:
    """The four figures of a health report, written into ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    return [make(report, folder / name) for make, name in zip(_MAKERS, FILES)]
