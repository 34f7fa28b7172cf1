"""Does a run's k-hat tell when its NSE understates the error?

``smle.loglik(method="eis")`` at its defaults (32 fitting, 512 scoring draws) over R seeds on one
simulated data set per design and T, against the exact value. Per design: the quantiles of the
runs' Pareto k-hat (``LoglikResult.k_hat``), sd over seeds against the mean NSE, and by k-hat
bin the rms error, the mean NSE and rms(error / NSE) (1 when the NSE is honest run by run).
The designs are those of experiments/eis_accuracy.py.

    python experiments/nse_tail.py            # writes experiments/results/nse_tail.{json,md}
    python experiments/nse_tail.py --quick    # R = 6, T = 500, not written
"""

from __future__ import annotations

import argparse
import json
import warnings
from pathlib import Path

import numpy as np

import smle
from eis_accuracy import DESIGNS as ACCURACY_DESIGNS  # experiments/eis_accuracy.py

RESULTS = Path(__file__).parent / "results"
DESIGNS = {name: params for name, (_, params) in ACCURACY_DESIGNS.items()}  # eis_accuracy's designs
BINS = ((0.0, 0.7), (0.7, 1.0), (1.0, np.inf))


def run_design(name, n_periods, n_seeds):
    params = DESIGNS[name]
    y, _ = smle.simulate(name, params, n_periods, seed=2026)
    exact = smle.loglik(name, params, y, method="exact").value
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the untrusted-NSE warning is what is being measured
        runs = [smle.loglik(name, params, y, method="eis", scoring="paths", seed=s) for s in range(n_seeds)]
    error = np.array([r.value - exact for r in runs])
    nse = np.array([r.nse for r in runs])
    k_hat = np.array([r.k_hat for r in runs])
    cell = {"exact": exact, "errors": error.tolist(), "nse": nse.tolist(), "k_hat": k_hat.tolist(),
            "k_hat_quantiles": np.quantile(k_hat, [0.1, 0.5, 0.9]).tolist(),
            "bias": float(error.mean()), "sd": float(error.std(ddof=1)), "mean_nse": float(nse.mean()), "bins": []}
    for low, high in BINS:
        inside = (k_hat >= low) & (k_hat < high)
        if inside.sum():
            cell["bins"].append({"low": low, "high": high, "n": int(inside.sum()),
                                 "rms_error": float(np.sqrt(np.mean(error[inside] ** 2))),
                                 "mean_nse": float(nse[inside].mean()),
                                 "rms_ratio": float(np.sqrt(np.mean((error[inside] / nse[inside]) ** 2)))})
    return cell


def write_markdown(cells):
    lines = ["# A run's k-hat and the honesty of its NSE", "",
             "`experiments/nse_tail.py`: `smle.loglik(method=\"eis\")` at its defaults (32 fitting, 512 scoring draws), "
             "one data set per design and T, against the exact value.", "",
             "| design, T | runs | k-hat 10/50/90% | bias | sd | mean NSE | sd / NSE | k-hat bin | runs in bin | "
             "rms error | mean NSE | rms(error / NSE) |", "|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for key, c in cells.items():
        q = "/".join(f"{v:.2f}" for v in c["k_hat_quantiles"])
        head = (f"| {key} | {len(c['errors'])} | {q} | {c['bias']:+.3f} | {c['sd']:.3f} | {c['mean_nse']:.3f} | "
                f"{c['sd'] / c['mean_nse']:.2f} |")
        for i, b in enumerate(c["bins"]):
            prefix = head if i == 0 else "| | | | | | | |"
            lines.append(f"{prefix} [{b['low']:g}, {b['high']:g}) | {b['n']} | {b['rms_error']:.3f} | "
                         f"{b['mean_nse']:.3f} | {b['rms_ratio']:.2f} |")
    (RESULTS / "nse_tail.md").write_text("\n".join(lines) + "\n")


def main(quick: bool):
    plan = [("sv", 500, 6)] if quick else [("sv", 2000, 60), ("garch-mix", 2000, 40), ("sv", 8000, 40),
                                           ("garch-mix", 8000, 30)]
    cells = {}
    for name, n_periods, n_seeds in plan:
        cells[f"{name} T={n_periods}"] = run_design(name, n_periods, n_seeds)
        print(name, n_periods, {k: v for k, v in cells[f"{name} T={n_periods}"].items()
                                if k not in ("errors", "nse", "k_hat")}, flush=True)
    if not quick:
        (RESULTS / "nse_tail.json").write_text(json.dumps(cells, indent=1))
        write_markdown(cells)


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true")
    main(parser.parse_args().quick)
