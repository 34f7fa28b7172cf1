"""The simulation part of an estimator's error: EIS against exact maximum likelihood on the same data.

Two designs of a study that share their simulated series (one names the other in ``data_from``),
one fitted by the exact method ("exact", or "auto" on a one-dimensional state) and the other by
EIS, give for replication r the EIS estimate theta_r^EIS and the exact maximum likelihood
estimate theta_r^ML of the same series. Since theta_r^EIS - theta = (theta_r^ML - theta) + d_r
with d_r = theta_r^EIS - theta_r^ML, and the exact estimator has no simulation error, d_r is the
simulation part of the EIS estimator's error. Over the n replications that both designs fitted
successfully (both converged too, with ``converged_only``), per parameter with truth theta:

==================  ====================================================  ==========================
statistic           definition                                            MCSE
==================  ====================================================  ==========================
mean_difference     mean(d_r)                                             sd_difference / sqrt(n)
sd_difference       sd(d_r) (ddof 1)                                      sd_difference / sqrt(2(n-1))
rmse_eis            sqrt(mean((theta_r^EIS - theta)^2)) over the n pairs  as in :mod:`.summary`
rmse_exact          the same for theta_r^ML                               as in :mod:`.summary`
simulation_share    sd_difference / rmse_eis                              not computed
==================  ====================================================  ==========================

simulation_share squared is the share of the EIS mean squared error that the simulation adds
when d_r is uncorrelated with the exact estimator's error. The MCSEs of mean and sd use the
normal approximation, as in :mod:`smle.study.summary`.

The log-likelihood, where the store has the exact value at the EIS estimate (``exact_loglik``):

* loglik_error: the EIS log-likelihood at its estimate minus the exact one there (mean, sd),
  beside the mean NSE the EIS fits reported for it;
* loglik_loss: the exact maximum (the exact design's log-likelihood) minus the exact value at
  the EIS estimate (mean): the likelihood the simulation cost the estimate.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from smle.study.tables import read_results, value_text


def _method(definition: dict) -> str:
    """The likelihood method a stored design ran: "exact" or "eis" ("auto" resolved by the model)."""
    method = definition.get("estimator", {}).get("method", "eis")
    if method == "auto":
        from smle.models import get_model

        state_dim = get_model(definition["model"], **definition.get("model_options", {})).state_dim
        return "exact" if state_dim == 1 else "eis"
    return method


def design_pairs(designs: pd.DataFrame) -> list[tuple[str, str]]:
    """``(eis design, exact design)`` pairs of designs sharing their data, in study order.

    Designs share their data when one names the other in ``data_from`` (or both name the same
    one). Each EIS design of such a group is paired with the group's first exact design.
    """
    groups: dict[str, list[tuple[str, str]]] = {}
    for name, definition in zip(designs["name"], designs["definition"]):
        groups.setdefault(definition.get("data_from", name), []).append((name, _method(definition)))
    pairs = []
    for members in groups.values():
        exact = [name for name, method in members if method == "exact"]
        if exact:
            pairs += [(name, exact[0]) for name, method in members if method == "eis"]
    return pairs


def paired_estimates(store, converged_only: bool = False) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The paired replications of every pair: ``(estimates, fits)``.

    ``estimates``: one row per pair, replication and parameter (eis_design, exact_design,
    replication, parameter, truth, eis, exact). ``fits``: one row per pair and replication
    (loglik_eis, exact_loglik_eis: the exact value at the EIS estimate, nse_eis, loglik_exact).
    Only replications both designs fitted successfully (and on the same data seed) are kept.
    """
    designs, replications, estimates = read_results(store)
    if "exact_loglik" not in replications:  # a store written before the column existed
        replications = replications.assign(exact_loglik=math.nan)
    done = replications[replications["status"] == "ok"]
    if converged_only:
        done = done[done["converged"] == 1]
    estimate_parts, fit_parts = [], []
    for eis, exact in design_pairs(designs):
        both = done[done["design"] == eis].merge(done[done["design"] == exact], on=["replication", "data_seed"],
                                                 suffixes=("_eis", "_exact"))
        fit_parts.append(pd.DataFrame({
            "eis_design": eis, "exact_design": exact, "replication": both["replication"],
            "loglik_eis": both["loglik_eis"], "exact_loglik_eis": both["exact_loglik_eis"],
            "nse_eis": both["nse_eis"], "loglik_exact": both["loglik_exact"]}))
        columns = ["replication", "parameter", "truth", "estimate"]
        merged = (estimates[estimates["design"] == eis][columns]
                  .merge(estimates[estimates["design"] == exact][columns], on=["replication", "parameter", "truth"],
                         suffixes=("_eis", "_exact")))
        merged = merged[merged["replication"].isin(both["replication"])]
        estimate_parts.append(pd.DataFrame({
            "eis_design": eis, "exact_design": exact, "replication": merged["replication"],
            "parameter": merged["parameter"], "truth": merged["truth"],
            "eis": merged["estimate_eis"], "exact": merged["estimate_exact"]}))
    if not estimate_parts:
        return (pd.DataFrame(columns=["eis_design", "exact_design", "replication", "parameter", "truth", "eis", "exact"]),
                pd.DataFrame(columns=["eis_design", "exact_design", "replication", "loglik_eis", "exact_loglik_eis",
                                      "nse_eis", "loglik_exact"]))
    return pd.concat(estimate_parts, ignore_index=True), pd.concat(fit_parts, ignore_index=True)


def difference_statistics(eis, exact, truth: float) -> dict:
    """The statistics of the module docstring for one parameter (arrays over the paired replications)."""
    eis, exact = np.asarray(eis, float), np.asarray(exact, float)
    finite = np.isfinite(eis) & np.isfinite(exact)
    eis, exact = eis[finite], exact[finite]
    n = eis.size
    difference = eis - exact
    sd = float(np.std(difference, ddof=1)) if n > 1 else math.nan
    rmse_eis = math.sqrt(float(np.mean((eis - truth) ** 2))) if n else math.nan
    return {
        "n_pairs": n,
        "mean_difference": float(np.mean(difference)) if n else math.nan,
        "mean_difference_mcse": sd / math.sqrt(n) if n > 1 else math.nan,
        "sd_difference": sd, "sd_difference_mcse": sd / math.sqrt(2 * (n - 1)) if n > 1 else math.nan,
        "rmse_eis": rmse_eis, "rmse_exact": math.sqrt(float(np.mean((exact - truth) ** 2))) if n else math.nan,
        "simulation_share": sd / rmse_eis if n > 1 and rmse_eis > 0 else math.nan,
    }


def loglik_statistics(fits: pd.DataFrame) -> dict:
    """Simulation error and loss of the EIS log-likelihood for one pair (module docstring)."""
    error = (fits["loglik_eis"] - fits["exact_loglik_eis"]).to_numpy(float)
    loss = (fits["loglik_exact"] - fits["exact_loglik_eis"]).to_numpy(float)
    known = np.isfinite(error)
    error, loss, nse = error[known], loss[known], fits["nse_eis"].to_numpy(float)[known]
    n = error.size
    return {
        "n_loglik": n,
        "loglik_error_mean": float(np.mean(error)) if n else math.nan,
        "loglik_error_sd": float(np.std(error, ddof=1)) if n > 1 else math.nan,
        "mean_nse": float(np.nanmean(nse)) if n and np.isfinite(nse).any() else math.nan,
        "loglik_loss_mean": float(np.nanmean(loss)) if n and np.isfinite(loss).any() else math.nan,
    }


def paired_differences(store, converged_only: bool = False) -> pd.DataFrame:
    """One row per pair of designs sharing their data (EIS against exact) and parameter:
    the statistics of the module docstring, the pair's log-likelihood facts repeated on each
    row. Empty for a study without such pairs."""
    estimates, fits = paired_estimates(store, converged_only)
    rows = []
    for (eis, exact), group in estimates.groupby(["eis_design", "exact_design"], sort=False):
        pair_fits = fits[(fits["eis_design"] == eis) & (fits["exact_design"] == exact)]
        loglik = loglik_statistics(pair_fits)
        for parameter, e in group.groupby("parameter", sort=False):
            truth = float(e["truth"].iloc[0])
            rows.append({"eis_design": eis, "exact_design": exact, "parameter": parameter, "truth": truth,
                         **difference_statistics(e["eis"], e["exact"], truth), **loglik})
    return pd.DataFrame(rows)


def paired_markdown(paired: pd.DataFrame) -> str:
    """Markdown: one table per pair (parameters as rows) and its log-likelihood line."""
    lines = []
    for (eis, exact), table in paired.groupby(["eis_design", "exact_design"], sort=False):
        first = table.iloc[0]
        lines += [f"## Simulation error: '{eis}' (EIS) against '{exact}' (exact maximum likelihood)", "",
                  f"The two designs estimate the same simulated series (data_from); {first['n_pairs']} replications "
                  "fitted by both. d = EIS estimate − exact estimate of the same series: the simulation part of "
                  "the EIS error. Share: sd(d) / RMSE of the EIS estimator against the truth. Cells: value ± Monte "
                  "Carlo standard error.", "",
                  "| parameter | truth | pairs | mean d | sd d | EIS rmse | exact rmse | sd d / EIS rmse |",
                  "|---|---:|---:|---:|---:|---:|---:|---:|"]
        for r in table.itertuples():
            lines.append(f"| {r.parameter} | {r.truth:.4g} | {r.n_pairs} | {value_text(r.mean_difference, r.mean_difference_mcse, 3)} "
                         f"| {value_text(r.sd_difference, r.sd_difference_mcse, 3)} | {value_text(r.rmse_eis, None, 3)} "
                         f"| {value_text(r.rmse_exact, None, 3)} | {value_text(r.simulation_share, None, 3)} |")
        lines.append("")
        if first["n_loglik"]:
            lines += [f"Log-likelihood ({first['n_loglik']} fits): the EIS value at the EIS estimate minus the exact "
                      f"value there, mean {value_text(first['loglik_error_mean'])}, sd "
                      f"{value_text(first['loglik_error_sd'], None, 3)} (mean reported NSE "
                      f"{value_text(first['mean_nse'], None, 3)}); the exact maximum lies "
                      f"{value_text(first['loglik_loss_mean'], None, 3)} above the exact value at the EIS estimate "
                      "on average.", ""]
        else:
            lines += ["Log-likelihood: the store has no exact value at the EIS estimates.", ""]
    return "\n".join(lines)
