"""The text table and the figure of a model comparison (:class:`smle.decision.compare.Comparison`)."""

from __future__ import annotations

from smle import report_text as layout
from smle.results import CAUTION


def summary_text(comparison) -> str:
    """The comparison in smle's report layout (:mod:`smle.report_text`): the models' table, the
    likelihood-ratio tests of the nested pairs, notes, the caution."""
    rows = comparison.rows()
    best_aic = min(r["aic"] for r in rows)
    best_bic = min(r["bic"] for r in rows)
    table = [f"{'':>3} {'model':<38}{'log-lik':>12}{'+/- sim.':>10}{'free':>6}{'AIC':>12}{'BIC':>12}{'dAIC':>10}"]
    for k, r in enumerate(rows, 1):
        error = f"{r['loglik_error']:.3f}" if r["method"] == "EIS" else "exact"
        flag = "  (not converged)" if not r["converged"] else ""
        table.append(f"{k:>3} {r['label'][:38]:<38}{r['loglik']:>12.3f}{error:>10}{r['free_parameters']:>6}"
                     f"{r['aic']:>12.2f}{r['bic']:>12.2f}{r['aic'] - best_aic:>10.2f}{flag}")
    table += ["", f"lowest AIC: model {1 + [r['aic'] for r in rows].index(best_aic)}; lowest BIC: model "
                  f"{1 + [r['bic'] for r in rows].index(best_bic)}",
              "+/- sim.: the numerical standard error of an EIS log-likelihood; exact: a closed form or the exact "
              "filter, no simulation error"]
    tests = []
    if comparison.tests:
        tests.append(f"{'restricted in general':<24}{'restrictions':<22}{'LR':>9}{'df':>4}{'p-value':>10}"
                     f"{'critical':>10}  law")
        for t in comparison.tests:
            tests.append(f"{f'{t.restricted} in {t.general}':<24}{t.restrictions[:21]:<22}{t.statistic:>9.3f}"
                         f"{t.df:>4}{t.p_value:>10.4f}{t.critical_value:>10.3f}  {t.reference}")
            if t.warning:
                tests.append(layout.warning(t.warning))
    return layout.render(
        layout.title("compare", f"{comparison.n_obs} periods", f"{len(rows)} models"),
        [layout.block("Models", table),
         layout.block(f"Nested pairs: likelihood-ratio tests at level {comparison.level:g}", tests),
         layout.block("Notes", [f"- {note}" for note in comparison.notes])],
        CAUTION)


def comparison_figure(comparison, path=None):
    """Log-likelihood and AIC per model with error bars of two numerical standard errors
    (zero for closed forms); saved to ``path`` if given. Returns the matplotlib figure."""
    import matplotlib

    if path is not None:
        matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    rows = comparison.rows()
    positions = list(range(1, len(rows) + 1))
    figure, (left, right) = plt.subplots(1, 2, figsize=(10, 0.5 * len(rows) + 2.5), sharey=True)
    errors = [2.0 * r["loglik_error"] for r in rows]
    left.errorbar([r["loglik"] for r in rows], positions, xerr=errors, fmt="o", capsize=4, color="tab:blue")
    left.set_xlabel("log-likelihood (bars: 2 numerical standard errors)")
    right.errorbar([r["aic"] for r in rows], positions, xerr=[2 * e for e in errors], fmt="s", capsize=4,
                   color="tab:red")
    right.set_xlabel("AIC (lower is better)")
    left.set_yticks(positions, [f"{k}: {r['label'][:32]}" for k, r in enumerate(rows, 1)])
    left.invert_yaxis()
    for axis in (left, right):
        axis.grid(alpha=0.3)
    figure.suptitle(f"model comparison, {comparison.n_obs} periods", fontsize=11)
    figure.text(0.01, 0.01, CAUTION, fontsize=6, wrap=True)
    figure.tight_layout(rect=(0, 0.04, 1, 1))
    if path is not None:
        figure.savefig(path, dpi=110)
        plt.close(figure)
    return figure
