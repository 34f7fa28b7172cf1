"""Figures of fit results (matplotlib, drawn off-screen)."""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402


def data_and_factor(result, y, label: str, path) -> Path:
    """Two panels: the data, and the smoothed latent factor with its 90% band."""
    y = np.asarray(y)
    t = np.arange(len(result.smoothed_mean))
    figure, (top, bottom) = plt.subplots(2, 1, figsize=(10, 6), sharex=True)
    top.plot(t, y if y.ndim == 1 else y[:, 0], lw=0.6, color="#33506e")
    top.set_ylabel(label)
    top.set_title(f"Data and smoothed {result.factor_name} ({result.model}, {result.n_obs} periods)")
    bottom.fill_between(t, result.smoothed_lower, result.smoothed_upper, color="#e3a857", alpha=0.45,
                        label="5%-95% posterior band")
    bottom.plot(t, result.smoothed_mean, color="#8c3b1e", lw=0.9, label="posterior mean")
    bottom.set_ylabel(result.factor_name)
    bottom.set_xlabel("period")
    bottom.legend(loc="upper right", fontsize=8)
    figure.tight_layout()
    figure.savefig(path, dpi=110)
    plt.close(figure)
    return Path(path)


def log_weights(result, path) -> Path:
    """Sorted log importance weights at the estimate, relative to their maximum."""
    w = np.sort(np.asarray(result.log_weights) - np.max(result.log_weights))[::-1]
    figure, axis = plt.subplots(figsize=(7, 4))
    axis.plot(np.arange(1, len(w) + 1), w, marker="o", ms=3, lw=0.8, color="#33506e")
    axis.set_xlabel("rank of draw (largest weight first)")
    axis.set_ylabel("log weight minus largest log weight")
    axis.set_title(f"EIS log-weights at the estimate (ESS {result.eis['ess']:.1f} of {len(w)})")
    axis.grid(alpha=0.3)
    figure.tight_layout()
    figure.savefig(path, dpi=110)
    plt.close(figure)
    return Path(path)
