"""Checks of drawn matplotlib figures: no text clipped or overlapping, legends off the data.

Common practice (no published source): a figure is readable when every label, title, tick label
and legend lies inside the figure and none covers another, and a legend covers no data.
"""

from __future__ import annotations

from matplotlib.backends.backend_agg import FigureCanvasAgg


def _texts(figure):
    """(name, bbox) of every visible, non-empty text and legend of the figure's axes."""
    FigureCanvasAgg(figure)
    renderer = figure.canvas.get_renderer()
    figure.draw(renderer)
    items = []
    for k, axis in enumerate(figure.axes):
        texts = [("title", axis.title), ("xlabel", axis.xaxis.label), ("ylabel", axis.yaxis.label)]
        for which, ticks, labels, limits in (("x", axis.get_xticks(), axis.get_xticklabels(), axis.get_xlim()),
                                             ("y", axis.get_yticks(), axis.get_yticklabels(), axis.get_ylim())):
            low, high = min(limits), max(limits)
            # tick labels outside the view limits are not drawn
            texts += [(f"{which}tick {t.get_text()}", t) for at, t in zip(ticks, labels) if low <= at <= high]
        for name, text in texts:
            if text.get_visible() and text.get_text().strip():
                items.append((f"axes {k} {name}", text.get_window_extent(renderer)))
        legend = axis.get_legend()
        if legend is not None:
            items.append((f"axes {k} legend", legend.get_window_extent(renderer)))
    return items, renderer


def assert_readable(figure, label: str = "") -> None:
    """Every text inside the figure, no two overlapping, every legend outside its axes' data area."""
    items, renderer = _texts(figure)
    frame = figure.bbox
    for name, box in items:
        assert box.x0 >= frame.x0 - 1 and box.x1 <= frame.x1 + 1 and box.y0 >= frame.y0 - 1 \
            and box.y1 <= frame.y1 + 1, f"{label}: {name} is clipped ({box} outside {frame})"
    for i, (name_a, a) in enumerate(items):
        for name_b, b in items[i + 1:]:
            assert not a.overlaps(b), f"{label}: {name_a} overlaps {name_b}"
    for axis in figure.axes:
        legend = axis.get_legend()
        if legend is not None:
            assert not legend.get_window_extent(renderer).overlaps(axis.get_window_extent(renderer)), \
                f"{label}: a legend lies over the data of its axes"
