"""Figures of fit results (matplotlib, drawn off-screen)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from smle.diagnostics.residual_tests import autocorrelations


def _subplots(*args, figsize, **kwargs):
    """A figure and its axes without pyplot, so that drawing here leaves a notebook's backend alone;
    constrained layout keeps labels, titles and the legends under the axes from overlapping."""
    figure = Figure(figsize=figsize, layout="constrained")
    return figure, figure.subplots(*args, **kwargs)


def time_axis(axis, n_periods: int, dates=None) -> None:
    """Label the time axis of ``axis`` (positions 0 .. n_periods - 1) with dates when there are."""
    if dates is not None and len(dates) == n_periods:
        ticks = np.unique(np.linspace(0, n_periods - 1, 6).astype(int))
        axis.set_xticks(ticks, [str(dates[i]) for i in ticks], fontsize=8, rotation=30, ha="right")
        axis.set_xlabel("date")
    else:
        axis.set_xlabel("period")


def _legend_below(axis, columns: int = 3) -> None:
    """The legend under the axes, outside them, so that it covers no point, bar or band."""
    axis.legend(fontsize=8, loc="upper center", bbox_to_anchor=(0.5, -0.18), ncols=columns, frameon=False)


def _figure_legend_below(axis, columns: int = 2) -> None:
    """For a figure whose lowest axes carry a time axis (dates, rotated): the legend in the
    "outside" slot of the constrained layout, which makes room below the tick labels and the
    axis label whatever their height."""
    handles, labels = axis.get_legend_handles_labels()
    axis.figure.legend(handles, labels, fontsize=8, loc="outside lower center", ncols=columns, frameon=False)


def factor_shown(model_name: str, options: dict | None, params: dict | None, *states):
    """The states as the model shows its factor (``Model.factor_display``) and the label:
    ``(label, shown_1, shown_2, ...)``. Without parameters, the states themselves."""
    from smle.models import saved_model

    model = saved_model(model_name, options)
    if params is None:
        return (model.factor_name, *(np.asarray(x, float) for x in states))
    shown = [model.factor_display(params, x) for x in states]
    return (shown[0][1], *(values for values, _ in shown))


def component_panels(model_name: str, options: dict | None, params: dict | None, *states):
    """Per panel of a factor figure: ``(label, shown_1, shown_2, ...)``. One panel as the model shows
    its factor (:func:`factor_shown`) for a one-dimensional state; for states of shape (T, k), one
    panel per component, labelled by ``Model.component_names``."""
    from smle.models import saved_model

    if np.ndim(states[0]) == 1:
        return [factor_shown(model_name, options, params, *states)]
    names = saved_model(model_name, options).component_names()
    return [(names[j], *(np.asarray(x, float)[:, j] for x in states)) for j in range(np.shape(states[0])[1])]


def data_and_factor(result, y, label: str, path) -> Path | Figure:
    """The data, and the smoothed factor with its 90% band, as the model shows it
    (``Model.factor_display``: the mixing factor of garch-mix, the volatility of the sv family),
    one panel per component for a k-dimensional state. With ``path=None`` the figure is returned
    instead of written."""
    y = np.asarray(y)
    t = np.arange(len(result.smoothed_mean))
    panels = component_panels(result.model, result.model_options, result.params, result.smoothed_mean,
                              result.smoothed_lower, result.smoothed_upper)
    figure, axes = _subplots(1 + len(panels), 1, figsize=(10, 3.25 * (1 + len(panels))), sharex=True)
    top = axes[0]
    top.plot(t, y if y.ndim == 1 else y[:, 0], lw=0.6, color="#33506e")
    top.set_ylabel(label)
    top.set_title(f"Data and smoothed factor ({result.model}, {result.n_obs} periods)")
    for bottom, (name, mean, lower, upper) in zip(axes[1:], panels):
        bottom.fill_between(t, lower, upper, color="#e3a857", alpha=0.45, label="5%-95% posterior band")
        bottom.plot(t, mean, color="#8c3b1e", lw=0.9, label="at the posterior mean of the state")
        bottom.set_ylabel(name)
    time_axis(bottom, len(t), getattr(result, "dates", None))
    _figure_legend_below(bottom, 2)
    if path is None:
        return figure
    figure.savefig(path, dpi=110)
    return Path(path)


def log_weights(result, path) -> Path:
    """Sorted log importance weights at the estimate, relative to their maximum."""
    w = np.sort(np.asarray(result.log_weights) - np.max(result.log_weights))[::-1]
    figure, axis = _subplots(figsize=(7, 4))
    axis.xaxis.set_major_locator(MaxNLocator(integer=True))  # ranks are integers
    axis.plot(np.arange(1, len(w) + 1), w, marker="o", ms=3, lw=0.8, color="#33506e")
    axis.set_xlabel("rank of draw (largest weight first)")
    axis.set_ylabel("log weight minus largest log weight")
    axis.set_title(f"EIS log-weights at the estimate (ESS {result.eis['ess']:.1f} of {len(w)})")
    axis.grid(alpha=0.3)
    figure.savefig(path, dpi=110)
    return Path(path)


# -- goodness of fit (smle.diagnose) -------------------------------------------------------------


def _band_normal(n: int, level: float = 0.95) -> float:
    """Half-width of the pointwise band of a sample autocorrelation under i.i.d. data, z / sqrt(T)."""
    from scipy.special import ndtri

    return float(ndtri(0.5 + level / 2)) / np.sqrt(n)


_COLOURS = ("#33506e", "#8c3b1e")


def diagnostics_figures(diagnostics, folder) -> list[Path]:
    """The four goodness-of-fit figures of a :class:`smle.diagnostics.gof.Diagnostics` report into ``folder``:
    Q-Q plot of the normal scores, PIT histogram with a 95% band, autocorrelation of the scores
    and squared scores with 95% bands, and the filtered and smoothed factor paths."""
    folder = Path(folder)
    paths = []
    for name, figure in draw_diagnostics(diagnostics).items():
        paths.append(folder / name)
        figure.savefig(paths[-1], dpi=110)
    return paths


def draw_diagnostics(diagnostics) -> dict[str, Figure]:
    """The four goodness-of-fit figures as Figure objects, by file name, without writing them."""
    figures = ((_qq_scores, "qq_scores.png"), (_pit_histogram, "pit_histogram.png"),
               (_autocorrelation_scores, "autocorrelation_scores.png"),
               (_factor_filtered_smoothed, "factor_filtered_smoothed.png"))
    return {name: draw(diagnostics) for draw, name in figures}


def _qq_scores(d) -> Figure:
    """Q-Q plot, with a pointwise 95% band from the order statistics of a normal sample."""
    from scipy import stats

    n, n_series = d.scores.shape
    figure, axes = _subplots(1, n_series, figsize=(5.2 * n_series, 4.6), squeeze=False)
    probabilities = (np.arange(1, n + 1) - 0.5) / n
    theoretical = stats.norm.ppf(probabilities)
    ranks = np.arange(1, n + 1)
    lower = stats.norm.ppf(stats.beta.ppf(0.025, ranks, n + 1 - ranks))
    upper = stats.norm.ppf(stats.beta.ppf(0.975, ranks, n + 1 - ranks))
    for k, axis in enumerate(axes[0]):
        axis.fill_between(theoretical, lower, upper, color="#cccccc", alpha=0.7, label="95% pointwise band")
        axis.plot(theoretical, np.sort(d.scores[:, k]), ".", ms=2.5, color=_COLOURS[k % len(_COLOURS)], label="normal scores")
        axis.plot(theoretical, theoretical, color="black", lw=0.8, label="45-degree line")
        axis.set_xlabel("standard normal quantile (no unit)")
        axis.set_ylabel("ordered normal score (no unit)")
        axis.set_title(f"Q-Q plot of {d.series[k]} normal scores ({d.model})")
        _legend_below(axis)
        axis.grid(alpha=0.3)
    return figure


def _pit_histogram(d) -> Figure:
    """PIT histogram: 20 bins; band from the binomial count of a bin under uniform PITs."""
    from scipy import stats

    n, n_series = d.scores.shape
    bins = 20
    figure, axes = _subplots(1, n_series, figsize=(5.2 * n_series, 4.2), squeeze=False)
    low, high = stats.binom.ppf([0.025, 0.975], n, 1.0 / bins) * bins / n
    for k, axis in enumerate(axes[0]):
        axis.hist(d.pit[:, k], bins=bins, range=(0, 1), density=True, color=_COLOURS[k % len(_COLOURS)], alpha=0.75,
                  edgecolor="white", label="PITs")
        axis.axhspan(low, high, color="#e3a857", alpha=0.35, label="95% band per bin (uniform PITs)")
        axis.axhline(1.0, color="black", lw=0.8)
        axis.set_xlabel("probability integral transform (no unit)")
        axis.set_ylabel("density (no unit)")
        axis.set_title(f"Histogram of {d.series[k]} PITs ({n} periods)")
        _legend_below(axis, 2)
    return figure


def _autocorrelation_scores(d) -> Figure:
    """Autocorrelation of the scores and the squared scores, with 95% bands under i.i.d. data."""
    n, n_series = d.scores.shape
    max_lag = int(min(30, n // 4))
    lags = np.arange(1, max_lag + 1)
    band = _band_normal(n)
    figure, axes = _subplots(n_series, 2, figsize=(10, 3.4 * n_series), squeeze=False)
    for k in range(n_series):
        for j, (values, what) in enumerate(((d.scores[:, k], "normal scores"), (d.scores[:, k] ** 2, "squared scores"))):
            axis = axes[k, j]
            axis.vlines(lags, 0, autocorrelations(values, max_lag), color=_COLOURS[k % len(_COLOURS)], lw=2)
            axis.axhspan(-band, band, color="#cccccc", alpha=0.6, label="95% band, i.i.d. (1.96 / sqrt(T))")
            axis.axhline(0, color="black", lw=0.6)
            axis.set_xlabel("lag (periods)")
            axis.set_ylabel("autocorrelation (no unit)")
            axis.set_title(f"Autocorrelation of {d.series[k]} {what}")
            _legend_below(axis, 1)
    return figure


def _factor_filtered_smoothed(d) -> Figure:
    """Factor paths: filtered (data up to t) and smoothed (all data), as the model shows its factor."""
    f = d.filter
    t = np.arange(d.scores.shape[0])
    panels = component_panels(d.model, d.model_options, d.params, f.filtered_lower, f.filtered_upper,
                              f.filtered_mean, d.smoothed_mean)
    figure, axes = _subplots(len(panels), 1, figsize=(10, 1.4 + 3.4 * len(panels)), sharex=True, squeeze=False)
    for axis, (name, low, high, filtered, smoothed) in zip(axes[:, 0], panels):
        axis.fill_between(t, low, high, color="#9fb8d0", alpha=0.5, label="filtered 5%-95%")
        axis.plot(t, filtered, color="#33506e", lw=0.8, label="at the filtered mean (data up to t)")
        axis.plot(t, smoothed, color="#8c3b1e", lw=0.8, label="at the smoothed mean (all data)")
        axis.set_ylabel(name)
        axis.grid(alpha=0.3)
    time_axis(axis, len(t), d.dates)
    how = f"{f.n_particles} particles" if f.simulated else f"exact, {f.engine}"
    axes[0, 0].set_title(f"Filtered and smoothed factor ({d.model}, {how})")
    _figure_legend_below(axis, 3)
    return figure
