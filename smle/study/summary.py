"""Summaries of a study store: per design and parameter, with Monte Carlo standard errors.

For the n successful replications of a design, estimates theta_r of a parameter with truth
theta (MCSE: the Monte Carlo standard error of each statistic, from the n replications):

=================  =============================================  ==========================================
statistic          definition                                     MCSE
=================  =============================================  ==========================================
mean               mean(theta_r)                                  sd / sqrt(n)
bias               mean - theta                                   sd / sqrt(n)
median             median(theta_r)                                sqrt(pi/2) sd / sqrt(n) (normal approx.)
sd                 empirical standard deviation (ddof 1)          sd / sqrt(2 (n - 1)) (normal approx.)
rmse               sqrt(mean((theta_r - theta)^2))                sd((theta_r - theta)^2) / (2 rmse sqrt(n))
mean_se            mean reported standard error                   sd(se_r) / sqrt(n_se)
se_ratio           mean_se / sd                                   delta method on the two above
coverage           share of intervals holding theta               sqrt(p (1 - p) / n_ci)
convergence_rate   share of fits reporting convergence            sqrt(p (1 - p) / n)
=================  =============================================  ==========================================

For the two proportions (coverage, convergence rate) the tables show a 95% Wilson score
interval (Wilson 1927, Journal of the American Statistical Association 22, 209-212) instead of
"p ± MCSE": with few replications, or p at 0 or 1, sqrt(p (1 - p) / n) is 0 or meaningless,
while the score interval stays honest (4 intervals of 4 covering: [0.51, 1]). The CSV carries
both (``coverage_lower``, ``coverage_upper``, ``coverage_mcse``; the same for
``convergence_rate``).

References: Morris, White and Crowther (2019), Statistics in Medicine 38 (simulation studies
and their Monte Carlo standard errors).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from smle.study import store as store_module
from smle.study.paired import paired_differences, paired_estimates, paired_markdown
from smle.study.runner import format_duration
from smle.study.tables import read_results
from smle.study.tables import value_text as _cell

STATISTICS = ("mean", "bias", "median", "sd", "rmse", "mean_se", "se_ratio", "coverage", "convergence_rate")


def _proportion(flags: np.ndarray) -> tuple[float, float]:
    n = flags.size
    if n == 0:
        return math.nan, math.nan
    p = float(np.mean(flags))
    return p, math.sqrt(p * (1 - p) / n)


def wilson_interval(successes: float, n: int, level: float = 0.95) -> tuple[float, float]:
    """Wilson score interval of a binomial proportion (Wilson 1927, JASA 22, 209-212); NaNs for n = 0.

    (p + z^2/(2n) ± z sqrt(p (1 - p)/n + z^2/(4 n^2))) / (1 + z^2/n), z the normal quantile of
    (1 + level)/2.
    """
    from statistics import NormalDist

    if n == 0:
        return math.nan, math.nan
    z = NormalDist().inv_cdf((1 + level) / 2)
    p = successes / n
    centre = p + z * z / (2 * n)
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    scale = 1 + z * z / n
    return max(0.0, (centre - half) / scale), min(1.0, (centre + half) / scale)


def _with_interval(name: str, flags: np.ndarray) -> dict:
    value, mcse = _proportion(flags)
    lower, upper = wilson_interval(float(np.sum(flags)), int(flags.size))
    return {name: value, f"{name}_mcse": mcse, f"{name}_lower": lower, f"{name}_upper": upper}


def parameter_statistics(estimates, truth: float, std_errors=None, lower=None, upper=None, converged=None) -> dict:
    """The statistics of the module docstring for one design and parameter (arrays over replications)."""
    theta = np.asarray(estimates, float)
    theta = theta[np.isfinite(theta)]
    n = theta.size
    out = {"n": n}
    if n == 0:
        return out | {k: math.nan for s in STATISTICS for k in (s, f"{s}_mcse")} | {
            f"{s}_{end}": math.nan for s in ("coverage", "convergence_rate") for end in ("lower", "upper")}
    mean = float(np.mean(theta))
    sd = float(np.std(theta, ddof=1)) if n > 1 else math.nan
    error2 = (theta - truth) ** 2
    rmse = math.sqrt(float(np.mean(error2)))
    out.update(
        mean=mean, mean_mcse=sd / math.sqrt(n),
        bias=mean - truth, bias_mcse=sd / math.sqrt(n),
        median=float(np.median(theta)), median_mcse=math.sqrt(math.pi / 2) * sd / math.sqrt(n),
        sd=sd, sd_mcse=sd / math.sqrt(2 * (n - 1)) if n > 1 else math.nan,
        rmse=rmse,
        rmse_mcse=(float(np.std(error2, ddof=1)) / math.sqrt(n) / (2 * rmse)) if n > 1 and rmse > 0 else math.nan,
    )
    se = np.asarray(std_errors if std_errors is not None else [], float)
    se = se[np.isfinite(se)]
    if se.size:
        mean_se = float(np.mean(se))
        mean_se_mcse = float(np.std(se, ddof=1)) / math.sqrt(se.size) if se.size > 1 else math.nan
        ratio = mean_se / sd if sd > 0 else math.nan
        ratio_mcse = ratio * math.hypot(mean_se_mcse / mean_se, out["sd_mcse"] / sd) if sd > 0 else math.nan
    else:
        mean_se = mean_se_mcse = ratio = ratio_mcse = math.nan
    out.update(n_se=int(se.size), mean_se=mean_se, mean_se_mcse=mean_se_mcse, se_ratio=ratio, se_ratio_mcse=ratio_mcse)
    if lower is not None and upper is not None:
        lo, hi = np.asarray(lower, float), np.asarray(upper, float)
        finite = np.isfinite(lo) & np.isfinite(hi)
        covered = (lo[finite] <= truth) & (truth <= hi[finite])
        out.update(n_ci=int(finite.sum()), **_with_interval("coverage", covered.astype(float)))
    else:
        out.update(n_ci=0, **_with_interval("coverage", np.zeros(0)))
    flags = np.asarray(converged if converged is not None else [], float)
    out.update(_with_interval("convergence_rate", flags[np.isfinite(flags)]))
    return out


def summarize(store, converged_only: bool = False) -> pd.DataFrame:
    """One row per (design, parameter): the statistics and their MCSEs, plus counts.

    Args:
      store: path of a study store.
      converged_only: use only the replications whose fit reported convergence (the
        convergence rate is then still over all successful replications).
    """
    designs, replications, estimates = read_results(store)
    rows = []
    for design in designs.itertuples():
        reps = replications[replications["design"] == design.name]
        ok = reps[reps["status"] == "ok"]
        converged_flags = ok["converged"].to_numpy(dtype=float)
        used = ok[ok["converged"] == 1] if converged_only else ok
        est = estimates[estimates["design"] == design.name]
        est = est[est["replication"].isin(used["replication"])]
        for parameter in dict.fromkeys(est["parameter"]):
            e = est[est["parameter"] == parameter]
            stats = parameter_statistics(e["estimate"], float(e["truth"].iloc[0]), e["std_error"], e["lower"],
                                         e["upper"], converged_flags)
            rows.append({"design": design.name, "model": design.model, "n_periods": design.n_periods,
                         "parameter": parameter, "truth": float(e["truth"].iloc[0]),
                         "replications_planned": int(design.replications), "replications_ok": int(len(ok)),
                         "replications_failed": int((reps["status"] == "failed").sum()), **stats})
    return pd.DataFrame(rows)


def _share(value, lower, upper) -> str:
    """A proportion with its Wilson interval: "0.75 [0.3, 0.95]"."""
    if value is None or not math.isfinite(value):
        return "–"
    return f"{value:.3g} [{lower:.2g}, {upper:.2g}]"


def markdown_tables(summary: pd.DataFrame, title: str = "study") -> str:
    """Markdown: one table per design, parameters as rows, each statistic as "value ± MCSE"
    (proportions as "value [Wilson 95% interval]")."""
    lines = [f"# Monte Carlo study: {title}", "",
             "Each cell: statistic ± its Monte Carlo standard error (over the successful replications). "
             "se/sd: mean reported standard error over the empirical standard deviation. "
             "Coverage: share of the intervals (at the level set in the design) that hold the truth. "
             "Coverage and convergence rate: share [95% Wilson score interval; Wilson 1927, JASA 22].", ""]
    for design, table in summary.groupby("design", sort=False):
        first = table.iloc[0]
        lines += [f"## {design}", "",
                  f"{first['model']}, T = {first['n_periods']}; {first['replications_ok']} of "
                  f"{first['replications_planned']} replications done, {first['replications_failed']} failed; "
                  f"convergence rate {_share(first['convergence_rate'], first['convergence_rate_lower'], first['convergence_rate_upper'])}.", "",
                  "| parameter | truth | mean | bias | median | sd | rmse | mean se | se/sd | coverage |",
                  "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|"]
        for r in table.itertuples():
            lines.append(f"| {r.parameter} | {r.truth:.4g} | {_cell(r.mean, r.mean_mcse)} | {_cell(r.bias, r.bias_mcse, 3)} "
                         f"| {_cell(r.median, r.median_mcse)} | {_cell(r.sd, r.sd_mcse, 3)} | {_cell(r.rmse, r.rmse_mcse, 3)} "
                         f"| {_cell(r.mean_se, r.mean_se_mcse, 3)} | {_cell(r.se_ratio, r.se_ratio_mcse, 3)} "
                         f"| {_share(r.coverage, r.coverage_lower, r.coverage_upper)} |")
        lines.append("")
    return "\n".join(lines)


def write_summary(store, folder, figures: bool = True, converged_only: bool = False, title: str | None = None) -> dict:
    """Write ``summary.csv``, ``summary.md`` (and figures) into ``folder``; return the paths written.

    For designs sharing their data, EIS against exact (:mod:`smle.study.paired`), also
    ``paired.csv``, a section of ``summary.md`` per pair and ``paired.png``.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    summary = summarize(store, converged_only)
    meta = store_module.read_meta(store)
    title = title or meta.get("study_name", Path(store).stem)
    written = {"csv": folder / "summary.csv", "markdown": folder / "summary.md"}
    summary.to_csv(written["csv"], index=False, float_format="%.10g")
    markdown = markdown_tables(summary, title)
    paired = paired_differences(store, converged_only)
    if len(paired):  # designs sharing their data, EIS against exact: the simulation part of the error
        written["paired_csv"] = folder / "paired.csv"
        paired.to_csv(written["paired_csv"], index=False, float_format="%.10g")
        markdown += "\n" + paired_markdown(paired)
    written["markdown"].write_text(markdown + "\n")
    if figures and len(summary):
        from smle.study import figures as fig

        written["bias_rmse"] = fig.bias_rmse_against_length(summary, folder / "bias_rmse.png", title)
        written["distributions"] = fig.estimate_distributions(store, folder / "distributions.png", title)
        if len(paired):
            written["paired"] = fig.paired_estimates_figure(paired_estimates(store, converged_only)[0],
                                                            folder / "paired.png", title)
    return written


def export_csv(store, path=None) -> pd.DataFrame:
    """One row per stored replication: key, seeds, status, fit facts and, per parameter,
    ``<name>``, ``<name>_se``, ``<name>_lower``, ``<name>_upper`` (and ``<name>_truth``). Written to ``path`` if given."""
    _, replications, estimates = read_results(store)
    wide = replications.copy()
    if len(estimates):
        pieces = []
        for column, suffix in (("estimate", ""), ("std_error", "_se"), ("lower", "_lower"), ("upper", "_upper"),
                               ("truth", "_truth"), ("simulation_std_error", "_simulation_se")):
            piece = estimates.pivot(index=["design", "replication"], columns="parameter", values=column)
            piece.columns = [f"{p}{suffix}" for p in piece.columns]
            pieces.append(piece)
        wide = wide.merge(pd.concat(pieces, axis=1).reset_index(), on=["design", "replication"], how="left")
    if path is not None:
        wide.to_csv(path, index=False, float_format="%.17g")
    return wide


def study_status(store) -> dict:
    """Where a study stands: per design planned / ok / failed / missing, totals, timing, runner state."""
    meta = store_module.read_meta(store)
    designs, replications, _ = read_results(store)
    per_design = []
    for d in designs.itertuples():
        reps = replications[replications["design"] == d.name]
        ok, failed = int((reps["status"] == "ok").sum()), int((reps["status"] == "failed").sum())
        per_design.append({"design": d.name, "planned": int(d.replications), "ok": ok, "failed": failed,
                           "missing": max(0, int(d.replications) - ok - failed),
                           "converged": int(reps["converged"].fillna(0).sum())})
    seconds = replications["elapsed_seconds"].dropna()
    missing = sum(p["missing"] for p in per_design)
    running = store_module.runner_alive(meta)
    return {
        "store": str(store), "study": meta.get("study_name"), "smle_version": meta.get("smle_version"),
        "schema_version": int(meta["schema_version"]), "created_at": meta.get("created_at"),
        "last_activity": meta.get("last_activity"), "state": "running" if running else ("complete" if missing == 0 else "stopped"),
        "runner_pid": int(meta["runner_pid"]) if running else None,
        "planned": sum(p["planned"] for p in per_design), "ok": sum(p["ok"] for p in per_design),
        "failed": sum(p["failed"] for p in per_design), "missing": missing,
        "mean_seconds_per_replication": float(seconds.mean()) if len(seconds) else math.nan,
        "designs": per_design,
    }


def format_status(status: dict) -> str:
    """The status as text."""
    per_rep = status["mean_seconds_per_replication"]
    head = (f"study {status['study']} ({status['state']}{', process ' + str(status['runner_pid']) if status['runner_pid'] else ''})"
            f"  store {status['store']}  smle {status['smle_version']}, store schema {status['schema_version']}\n"
            f"{status['ok']} ok + {status['failed']} failed of {status['planned']} planned, {status['missing']} missing; "
            f"last result {status['last_activity'] or 'none yet'}; "
            f"{format_duration(per_rep) if math.isfinite(per_rep) else '?'} per replication on one worker, "
            f"so about {format_duration(per_rep * status['missing']) if math.isfinite(per_rep) else '?'} of worker time left")
    width = max([len(d["design"]) for d in status["designs"]] + [6])
    lines = [head, "", f"{'design':<{width}}  planned       ok   failed  missing  converged"]
    for d in status["designs"]:
        lines.append(f"{d['design']:<{width}}  {d['planned']:7d}  {d['ok']:7d}  {d['failed']:7d}  {d['missing']:7d}  {d['converged']:9d}")
    return "\n".join(lines)
