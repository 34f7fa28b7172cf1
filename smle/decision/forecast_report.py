"""The text summary and the fan chart of a forecast (:class:`smle.decision.forecast.Forecast`)."""

from __future__ import annotations

import numpy as np

from smle import report_text as layout
from smle.models import model_title
from smle.decision.report_files import finish_figure, pyplot
from smle.results import CAUTION

_SHOWN_STEPS = (1, 2, 3, 5, 10, 20, 50, 100, 200, 500, 1000)
_TITLES = {"return": "Return r_{T+k}", "cumulative return": "Cumulative return r_{T+1} + ... + r_{T+k}",
           "variance": "Variance of r_{T+k} given the period's state"}


def shown_steps(horizon: int) -> list[int]:
    """Every step up to 12, else a geometric selection and the last one."""
    if horizon <= 12:
        return list(range(1, horizon + 1))
    return sorted({k for k in _SHOWN_STEPS if k <= horizon} | {horizon})


def _quantity_block(forecast, quantity: str) -> list[str]:
    part = forecast.stats[quantity]
    fan = [p for p in forecast.probabilities if p in (0.05, 0.5, 0.95)]
    tails = "var" in part
    header = f"{'step':>5}{'mean':>11}{'sd':>11}" + "".join(f"{f'{p:.0%}':>11}" for p in fan)
    if tails:
        header += "".join(f"{f'VaR {p:g}':>11}{f'ES {p:g}':>11}" for p in forecast.levels)
    rows = [header]
    probabilities = list(forecast.probabilities)
    for k in shown_steps(forecast.horizon):
        j = k - 1
        row = f"{k:>5}{part['mean'][j]:>11.4g}{part['sd'][j]:>11.4g}"
        row += "".join(f"{part['quantiles'][probabilities.index(p)][j]:>11.4g}" for p in fan)
        if tails:
            row += "".join(f"{part['var'][i][j]:>11.4g}{part['es'][i][j]:>11.4g}" for i in range(len(forecast.levels)))
        rows.append(row)
    return layout.block(_TITLES[quantity], rows)


def _monte_carlo_block(forecast) -> list[str]:
    lines = []
    for quantity in ("return", "cumulative return"):
        part = forecast.stats[quantity]
        errors = [f"mean {np.max(part['mean_se']):.2g}"]
        errors += [f"VaR {p:g} {np.max(part['var_se'][i]):.2g}, ES {p:g} {np.max(part['es_se'][i]):.2g}"
                   for i, p in enumerate(forecast.levels)]
        lines.append(layout.field(f"largest standard error over steps, {quantity}", "; ".join(errors)))
    lines.append(layout.field("largest standard error over steps, variance mean",
                              f"{np.max(forecast.stats['variance']['mean_se']):.2g}"))
    if forecast.parameter_draws:
        lines.append(f"paths pooled over {forecast.parameter_draws} parameter draws: the means' errors are "
                     "cluster-robust (one cluster per draw); the VaR and ES errors treat the paths as independent "
                     "and understate")
    return layout.block(f"Monte Carlo ({forecast.n_paths} paths, seed {forecast.seed})", lines)


def summary_text(forecast) -> str:
    """The forecast in smle's report layout: start, one table per quantity, Monte Carlo errors."""
    where = f"{forecast.n_obs} periods" + (f" to {forecast.last_date}" if forecast.last_date else "")
    parameters = ", ".join(f"{k} {v:.5g}" for k, v in forecast.params.items())
    start = layout.block("Start", [
        forecast.start,
        layout.field("parameters (taken as known: their uncertainty is not in the bands)" if not
                     forecast.parameter_draws else f"parameters (estimates; the paths are pooled over "
                     f"{forecast.parameter_draws} draws from their asymptotic normal law, so the bands include the "
                     "parameter error)", parameters),
        "VaR_p = -q_p, the loss exceeded with probability p; ES_p = -E[r | r <= q_p]; units of the data",
        *([layout.warning(forecast.parameter_note)] if forecast.parameter_note else []),
    ])
    blocks = [start] + [_quantity_block(forecast, q) for q in ("return", "cumulative return", "variance")]
    blocks.append(_monte_carlo_block(forecast))
    return layout.render(layout.title("forecast", f"model {model_title(forecast.model, forecast.model_options)}", where,
                                      f"{forecast.horizon} steps ahead"), blocks, CAUTION)


def _fan(axis, steps, part, probabilities, color):
    probabilities = list(probabilities)
    q = part["quantiles"]
    axis.fill_between(steps, q[probabilities.index(0.05)], q[probabilities.index(0.95)], color=color, alpha=0.2,
                      label="5% to 95%")
    axis.fill_between(steps, q[probabilities.index(0.25)], q[probabilities.index(0.75)], color=color, alpha=0.4,
                      label="25% to 75%")
    axis.plot(steps, q[probabilities.index(0.5)], color=color, lw=1.5, label="median")


def fan_chart(forecast, path=None):
    """Three panels: the last observed returns and the return fan with the VaR at each level,
    the cumulative return fan, the variance fan. Saved to ``path`` if given (Agg back-end)."""
    plt = pyplot(path)
    from matplotlib.ticker import MaxNLocator
    steps = np.arange(1, forecast.horizon + 1)
    figure, axes = plt.subplots(3, 1, figsize=(9, 9))
    history = np.asarray(forecast.history)[-max(60, 4 * forecast.horizon):]  # recent enough to see the fan
    past = np.arange(-len(history) + 1, 1)
    axes[0].plot(past, history, color="0.4", lw=0.7, label="observed")
    for axis, quantity, color in zip(axes, ("return", "cumulative return", "variance"),
                                     ("tab:blue", "tab:green", "tab:red")):
        part = forecast.stats[quantity]
        _fan(axis, steps, part, forecast.probabilities, color)
        if quantity != "variance":
            for i, p in enumerate(forecast.levels):
                axis.plot(steps, -part["var"][i], ls="--", lw=1, label=f"-VaR {p:g}")
        axis.set_title(_TITLES[quantity], fontsize=10)
        axis.xaxis.set_major_locator(MaxNLocator(integer=True))
        axis.grid(alpha=0.3)
        axis.legend(fontsize=7, loc="upper left", ncol=3)
    axes[0].axvline(0.5, color="0.6", lw=0.8)
    axes[-1].set_xlabel("steps after the last observed period")
    when = f" (last period {forecast.last_date})" if forecast.last_date else ""
    figure.suptitle(f"forecast, model {model_title(forecast.model, forecast.model_options)}, {forecast.n_paths} paths{when}", fontsize=11)
    return finish_figure(figure, path, 0.03)
