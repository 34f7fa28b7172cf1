"""What the forecast and backtest results share: JSON text, and the opening and closing of a figure
(the Agg back-end when writing a file, the caution under the panels)."""

from __future__ import annotations

import json
from pathlib import Path

from smle.results import CAUTION


class JsonReport:
    """``to_json`` and ``__str__`` for a result class with ``to_dict`` and ``summary``."""

    def to_json(self, path=None) -> str:
        """JSON text of ``to_dict()`` (NaN allowed); optionally written to ``path``."""
        text = json.dumps(self.to_dict(), indent=1, allow_nan=True)
        if path is not None:
            Path(path).write_text(text)
        return text

    def __str__(self) -> str:
        return self.summary()


def pyplot(path):
    """matplotlib.pyplot, with the file back-end (Agg) when a figure is to be written to ``path``."""
    import matplotlib

    if path is not None:
        matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    return plt


def finish_figure(figure, path, bottom: float = 0.04):
    """The caution under the panels, a tight layout, and the file at ``path`` (the figure is then
    closed); returns the figure."""
    figure.text(0.01, 0.01, CAUTION, fontsize=6, wrap=True)
    figure.tight_layout(rect=(0, bottom, 1, 1))
    if path is not None:
        figure.savefig(path, dpi=110)
        pyplot(path).close(figure)
    return figure
