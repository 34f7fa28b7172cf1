"""How accurate is the EIS log-likelihood against the exact (grid) value, at what cost, and is
its reported NSE honest?

Designs: ``sv`` (mu -7.36, phi 0.95, sigma_eta 0.26) and ``garch-mix`` (ig link, lambda 1.5,
rho 0.5), one simulated data set per T. For each estimator setting and T, ``smle.loglik`` is run
with R seeds; against the grid-filter value (1600 points over +-10 stationary sd, checked by
halving) it reports bias, sd, RMSE, the median seconds per call (after a warm-up call), and the
ratio sd / mean reported NSE for each NSE estimate the result carries (delta method, log-normal,
between-batch).

Settings compared (the levers): the fitting draws S, the scoring draws (``n_score_draws``) and
the iteration cap (``max_iter``; tol 1e-12 with a cap of 5 means exactly 5 iterations), and the
defaults of ``smle.loglik`` (iterate to a relative change of 1e-2). ``method="eis"`` throughout
(the default method of a one-dimensional state is exact).

    python experiments/eis_accuracy.py --only "new default" --merge   # re-run the matching rows,
                                                                      # keep the others from the json

    python experiments/eis_accuracy.py            # R = 24 (writes experiments/results/)
    python experiments/eis_accuracy.py --quick    # R = 4, T = 500 only, not written
"""

from __future__ import annotations

import argparse
import json
import re
import time
from pathlib import Path

import numpy as np

import smle
from smle.engine.sampler import DRAWS, MAX_ITER, SCORE_DRAWS, TOL
from smle.reference import grid_loglik

RESULTS = Path(__file__).parent / "results"
GARCH = dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.06, beta=0.90, gamma=-0.4, rho=0.5, **{"lambda": 1.5})
DESIGNS = {"sv": ("sv", dict(mu=-7.36, phi=0.95, sigma_eta=0.26)), "garch-mix": ("garch-mix", GARCH)}
SETTINGS = {
    "S64 (old default)": dict(n_draws=64, n_score_draws=None, max_iter=50, tol=1e-6),
    "S32 score 512, tol 1e-2 (new default)": dict(n_draws=DRAWS, n_score_draws=SCORE_DRAWS, max_iter=MAX_ITER, tol=TOL),
    "S32 score 512, 3 it": dict(n_draws=32, n_score_draws=512, max_iter=3, tol=1e-12),
    "S32 score 512, 5 it": dict(n_draws=32, n_score_draws=512, max_iter=5, tol=1e-12),
    "S32 score 1024, 5 it": dict(n_draws=32, n_score_draws=1024, max_iter=5, tol=1e-12),
}


def exact(model, params, y):
    coarse = grid_loglik(model, params, y, n_grid=800, width=10.0)
    fine = grid_loglik(model, params, y, n_grid=1600, width=10.0)
    return fine, abs(fine - coarse)


def run_cell(model, params, y, truth, options, n_seeds):
    smle.loglik(model, params, y, seed=10_000, method="eis", scoring="paths", **options)  # compile
    values, seconds, cpu, nses = [], [], [], {}
    for seed in range(n_seeds):
        start, start_cpu = time.perf_counter(), time.process_time()
        result = smle.loglik(model, params, y, seed=seed, method="eis", scoring="paths", **options)
        seconds.append(time.perf_counter() - start)
        cpu.append(time.process_time() - start_cpu)
        values.append(result.value)
        for name, value in {"reported": result.nse, **(result.nse_estimates or {})}.items():
            nses.setdefault(name, []).append(value)
    values = np.asarray(values)
    error = values - truth
    sd = float(np.std(values, ddof=1))
    return {
        "bias": float(np.mean(error)), "sd": sd, "rmse": float(np.sqrt(np.mean(error**2))),
        "seconds": float(np.median(seconds)), "cpu_seconds": float(np.median(cpu)), "seeds": n_seeds,
        "sd_over_nse": {name: sd / float(np.mean(v)) for name, v in nses.items()},
        "nse_method": result.nse_method, "iterations": result.iterations, "converged": result.converged,
        "values": values.tolist(), "nse": nses,
    }


def run(n_seeds, lengths, write, only=None, merge=False):
    """Measure every cell (or those whose setting name matches the regular expression ``only``);
    with ``merge`` the cells already in the json are kept and the measured ones replace theirs."""
    out = json.loads((RESULTS / "eis_accuracy.json").read_text())["cells"] if merge else {}
    for label, (model, params) in DESIGNS.items():
        for n_periods in lengths:
            y, _ = smle.simulate(model, params, n_periods, seed=2026)
            truth, check = exact(model, params, y)
            for name, options in SETTINGS.items():
                if only and not re.search(only, name):
                    continue
                cell = run_cell(model, params, y, truth, options, n_seeds)
                cell.update(exact=truth, grid_check=check)
                out[f"{label} T={n_periods} {name}"] = cell
                print(label, n_periods, name, json.dumps(cell), flush=True)
    if write:
        (RESULTS / "eis_accuracy.json").write_text(json.dumps({"seeds": n_seeds, "cells": dict(sorted(out.items()))},
                                                              indent=1))
        write_markdown(dict(sorted(out.items())))


def write_markdown(cells):
    lines = ["# EIS accuracy against the exact (grid) log-likelihood", "",
             "`experiments/eis_accuracy.py`, one data set per design and T; seconds: median wall time of "
             "one `smle.loglik` call on a shared 2-core machine (cpu: its process CPU time, less moved by the "
             "load of other jobs). sd/NSE: sd across seeds over the mean reported NSE, for each NSE estimate "
             "(reported = the one `nse` holds). Cells measured together have the same date in git.", "",
             "| design, T, setting | seeds | bias | sd | RMSE | s/call | cpu s/call | sd/NSE reported | delta | lognormal "
             "| batches |",
             "|---|---|---|---|---|---|---|---|---|---|---|"]
    for key, c in cells.items():
        r = c["sd_over_nse"]
        cpu = f"{c['cpu_seconds']:.3f}" if "cpu_seconds" in c else ""
        lines.append(f"| {key} | {c.get('seeds', 20)} | {c['bias']:+.3f} | {c['sd']:.3f} | {c['rmse']:.3f} | "
                     f"{c['seconds']:.3f} | {cpu} | {r['reported']:.2f} | {r['delta']:.2f} | {r['lognormal']:.2f} | "
                     f"{r['batches']:.2f} |")
    (RESULTS / "eis_accuracy.md").write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--seeds", type=int, default=24)
    parser.add_argument("--only", default=None, help="regular expression: measure only the matching settings")
    parser.add_argument("--merge", action="store_true", help="keep the other cells of the json")
    args = parser.parse_args()
    if args.quick:
        run(4, (500,), write=False, only=args.only)
    else:
        run(args.seeds, (2000, 8000), write=True, only=args.only, merge=args.merge)
