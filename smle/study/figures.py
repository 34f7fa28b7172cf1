"""Figures of a study: bias and RMSE against the sample length, estimates against the truth.

Drawn with matplotlib's Agg back-end (files only, no display needed).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def bias_rmse_against_length(summary, path, title: str = "study") -> Path:
    """Per parameter: bias and RMSE (with ±2 MCSE bars) against T, one line per design family.

    A family is the designs with the same model, true parameters and name apart from T; with
    one T per family the points stand alone. When every design has the same T, the designs
    themselves are the horizontal axis.
    """
    plt = _pyplot()
    parameters = list(dict.fromkeys(summary["parameter"]))
    by_design = summary["n_periods"].nunique() == 1
    x, x_label = ("design", "design") if by_design else ("n_periods", "sample length T")
    families = summary.assign(family=f"T = {summary['n_periods'].iloc[0]}" if by_design else
                              summary["design"].str.replace(r"[, ]*T\s*=\s*\d+", "", regex=True))
    fig, axes = plt.subplots(2, len(parameters), figsize=(4.2 * len(parameters), 7), squeeze=False)
    for j, parameter in enumerate(parameters):
        rows = families[families["parameter"] == parameter]
        for family, group in rows.groupby("family", sort=False):
            group = group if by_design else group.sort_values("n_periods")
            for i, (stat, label) in enumerate((("bias", "bias"), ("rmse", "RMSE"))):
                axes[i, j].errorbar(group[x], group[stat], yerr=2 * group[f"{stat}_mcse"].fillna(0),
                                    marker="o", capsize=3, label=family)
        axes[0, j].axhline(0.0, color="grey", lw=0.8)
        axes[0, j].set_title(f"{parameter}: bias")
        axes[1, j].set_title(f"{parameter}: RMSE")
        for i, label in enumerate(("bias (estimate − truth)", "RMSE")):
            axes[i, j].set_xlabel(x_label)
            axes[i, j].set_ylabel(label)
    handles, labels = axes[0, 0].get_legend_handles_labels()
    if len(labels) <= 12:
        fig.legend(handles, labels, loc="lower center", ncol=min(len(labels), 3), fontsize="small")
    fig.suptitle(f"{title}: bias and RMSE against {'design' if by_design else 'T'} (bars: ±2 Monte Carlo s.e.)")
    fig.tight_layout(rect=(0, 0.1 if len(labels) <= 12 else 0, 1, 0.96))
    path = Path(path)
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


def estimate_distributions(store, path, title: str = "study") -> Path:
    """Histograms of the estimates per design (rows) and parameter (columns), truth marked."""
    from smle.study.tables import read_results

    plt = _pyplot()
    designs, replications, estimates = read_results(store)
    ok = replications[replications["status"] == "ok"][["design", "replication"]]
    estimates = estimates.merge(ok, on=["design", "replication"])
    names = [d for d in designs["name"] if d in set(estimates["design"])]
    parameters = list(dict.fromkeys(estimates["parameter"]))
    fig, axes = plt.subplots(max(1, len(names)), max(1, len(parameters)),
                             figsize=(3.6 * max(1, len(parameters)), 2.4 * max(1, len(names))), squeeze=False)
    for i, design in enumerate(names):
        for j, parameter in enumerate(parameters):
            ax = axes[i, j]
            e = estimates[(estimates["design"] == design) & (estimates["parameter"] == parameter)]
            values = e["estimate"].to_numpy(float)
            values = values[np.isfinite(values)]
            truth = float(e["truth"].iloc[0]) if len(e) else math.nan
            if values.size:
                ax.hist(values, bins=max(5, min(30, values.size // 4)), color="#4c72b0", alpha=0.8)
            ax.axvline(truth, color="#c44e52", lw=1.5, label="truth")
            ax.set_title(f"{design}: {parameter} (n = {values.size})", fontsize="small")
            ax.set_xlabel(f"estimate of {parameter}")
            ax.set_ylabel("replications")
    return _finish(plt, fig, axes, f"{title}: distribution of the estimates (red line: true value)", 0.97, path)


def _finish(plt, fig, axes, heading: str, top: float, path) -> Path:
    """Legend of the first panel, the heading, the layout; saved to ``path`` and closed."""
    axes[0, 0].legend(fontsize="small")
    fig.suptitle(heading)
    fig.tight_layout(rect=(0, 0, 1, top))
    path = Path(path)
    fig.savefig(path, dpi=100)
    plt.close(fig)
    return path


def paired_estimates_figure(estimates, path, title: str = "study") -> Path:
    """EIS estimates against exact maximum likelihood estimates of the same series, one row per
    pair of designs sharing their data and one column per parameter (the diagonal: no simulation
    error; the grey lines: the truth). ``estimates`` as from :func:`smle.study.paired.paired_estimates`."""
    plt = _pyplot()
    pairs = list(dict.fromkeys(zip(estimates["eis_design"], estimates["exact_design"])))
    parameters = list(dict.fromkeys(estimates["parameter"]))
    fig, axes = plt.subplots(len(pairs), len(parameters), figsize=(3.6 * len(parameters), 3.4 * len(pairs)),
                             squeeze=False)
    for i, (eis, exact) in enumerate(pairs):
        for j, parameter in enumerate(parameters):
            ax = axes[i, j]
            e = estimates[(estimates["eis_design"] == eis) & (estimates["exact_design"] == exact)
                          & (estimates["parameter"] == parameter)]
            x, y = e["exact"].to_numpy(float), e["eis"].to_numpy(float)
            ax.scatter(x, y, s=12, color="#4c72b0", alpha=0.8)
            if len(e):
                truth = float(e["truth"].iloc[0])
                ends = np.nanmin(np.r_[x, y]), np.nanmax(np.r_[x, y])
                ax.plot(ends, ends, color="#c44e52", lw=1, label="EIS = exact")
                ax.axvline(truth, color="grey", lw=0.8)
                ax.axhline(truth, color="grey", lw=0.8)
            ax.set_title(f"{parameter} (n = {len(e)})", fontsize="small")
            ax.set_xlabel(f"exact: {exact}", fontsize="small")
            ax.set_ylabel(f"EIS: {eis}", fontsize="small")
    return _finish(plt, fig, axes, f"{title}: EIS against exact estimates of the same series (grey: truth)", 0.95,
                   path)
