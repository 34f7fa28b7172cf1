"""The text summary and the figure of a backtest (:class:`smle.decision.backtest.Backtest`)."""

from __future__ import annotations

import numpy as np

from smle import report_text as layout
from smle.models import model_title
from smle.decision.report_files import finish_figure, pyplot
from smle.results import CAUTION


def _coverage_block(backtest) -> list[str]:
    rows = [f"{'level':>7}{'hits':>6}{'expected':>10}{'rate':>8}{'Kupiec LR':>11}{'p':>8}"
            f"{'indep. LR':>11}{'p':>8}{'cond. LR':>10}{'p':>8}"]
    for entry in backtest.coverage():
        k, i, c = entry["kupiec"], entry["independence"], entry["conditional"]
        rows.append(f"{entry['level']:>7g}{k.n_hits:>6}{entry['level'] * k.n_periods:>10.1f}{k.hit_rate:>8.4f}"
                    f"{k.statistic:>11.3f}{k.p_value:>8.3f}{i.statistic:>11.3f}{i.p_value:>8.3f}"
                    f"{c.statistic:>10.3f}{c.p_value:>8.3f}")
    rows.append("hit: r_t < -VaR_t. Kupiec (1995) unconditional coverage, chi2(1); Christoffersen (1998) "
                "independence, chi2(1), and conditional coverage, chi2(2)")
    return layout.block("Coverage of the value at risk", rows)


def _refit_block(backtest) -> list[str]:
    refits = backtest.refits
    failed = [r["period"] for r in refits if not r["converged"]]
    lines = [layout.field("estimations", f"{len(refits)} (every {backtest.refit_every} forecasts on the "
                                         f"{backtest.window} periods before, warm-started)")]
    for label, entry in (("first", refits[0]), ("last", refits[-1])):
        values = ", ".join(f"{k} {v:.4g}" for k, v in entry["params"].items())
        lines.append(layout.field(f"{label} estimates (row {entry['period']})", values))
    if failed:
        lines.append(layout.warning(f"{len(failed)} fit(s) did not converge (forecast rows {failed[:5]}"
                                    f"{' ...' if len(failed) > 5 else ''}): their estimates were used as they are"))
    return layout.block("Estimation", lines)


def summary_text(backtest) -> str:
    """The backtest in smle's report layout: coverage tests, log score, estimations."""
    n = backtest.periods.size
    span = f"rows {backtest.periods[0]} to {backtest.periods[-1]}"
    if backtest.dates:
        span += f" ({backtest.dates[0]} to {backtest.dates[-1]})"
    score = layout.block("Out-of-sample log score (exact one-step predictive density)", [
        layout.field("mean", f"{np.mean(backtest.log_score):.4f} (sum {np.sum(backtest.log_score):.3f} over {n} "
                             "periods)"),
        layout.field("Monte Carlo", f"{backtest.n_paths} paths per forecast, seed {backtest.seed}; VaR standard "
                                    f"error up to {np.max(backtest.var_se):.2g}"),
    ])
    return layout.render(
        layout.title("backtest", f"model {model_title(backtest.model, backtest.model_options)}", f"{n} one-step forecasts", span,
                     f"{backtest.elapsed_seconds:.1f} s"),
        [_coverage_block(backtest), score, _refit_block(backtest)], CAUTION)


def backtest_figure(backtest, path=None):
    """Realized returns with -VaR at each level and the hits marked; saved to ``path`` if given."""
    plt = pyplot(path)
    figure, axis = plt.subplots(figsize=(10, 4.5))
    x = backtest.periods
    axis.plot(x, backtest.realized, color="0.4", lw=0.7, label="realized")
    for i, p in enumerate(backtest.levels):
        line, = axis.plot(x, -backtest.value_at_risk[i], lw=1, label=f"-VaR {p:g}")
        hit = backtest.hits[i].astype(bool)
        axis.scatter(x[hit], backtest.realized[hit], color=line.get_color(), s=14, zorder=3,
                     label=f"hits {p:g}: {int(hit.sum())} of {hit.size}")
    axis.set_xlabel("row of the data (forecast period)")
    axis.grid(alpha=0.3)
    axis.legend(fontsize=7, ncol=2)
    axis.set_title(f"backtest, model {model_title(backtest.model, backtest.model_options)}: window {backtest.window}, refit every {backtest.refit_every}",
                   fontsize=10)
    return finish_figure(figure, path, 0.04)
