"""The health check (smle.check) measured against the exact log-likelihood: EIS bias, RMSE and the
honesty of its reported NSE at default settings, over several designs.

Designs (one simulated data set per design and T, data seed 2026): ``sv`` (mu -7.36, phi 0.95,
sigma_eta 0.26) at T = 1000 and 8000, ``garch-mix`` (ig link, lambda 1.5, rho 0.5) at T = 2000
and 8000, plus ``sv`` at T = 500 with 8 and 64 draws (few draws: single runs' NSEs understate
their errors). Each check: default draws (64, antithetic) unless stated, R seeds, 2000 tail
draws, no NSE grid. The exact value is the check's own reference (grid filter to 1e-8).

Reported per design: bias (mean error) with its se and t, RMSE, sd over seeds, mean reported
NSE (root mean square), RMSE / NSE and the root mean square of error / own NSE with the 99%
range of an honest NSE (chi-square, R dof), the bias-corrected mean's error, the verdict and
the seconds of the whole check.

    python experiments/check_against_exact.py            # R = 40 (writes experiments/results/)
    python experiments/check_against_exact.py --quick    # R = 4, T = 500 only, not written
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import smle
from machine import cpu_model

RESULTS = Path(__file__).parent / "results"
SV = dict(mu=-7.36, phi=0.95, sigma_eta=0.26)
GARCH = dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.06, beta=0.90, gamma=-0.4, rho=0.5, **{"lambda": 1.5})
DESIGNS = [("sv", SV, 1000, 64), ("sv", SV, 8000, 64), ("garch-mix", GARCH, 2000, 64), ("garch-mix", GARCH, 8000, 64),
           ("sv", SV, 500, 8), ("sv", SV, 500, 64)]


def measure(model, params, n_periods, n_draws, n_seeds):
    y, _ = smle.simulate(model, params, n_periods, seed=2026)
    started = time.perf_counter()
    report = smle.check(model, params, y, n_draws=n_draws, n_seeds=n_seeds, seed=0, tail_draws=2000,
                        draws_grid=None)
    seconds = time.perf_counter() - started
    x = report.exact
    return {
        "model": model, "T": n_periods, "n_draws": n_draws, "seeds": n_seeds, "exact": x.loglik,
        "reference": report.reference, "bias": x.bias, "bias_se": x.bias_se, "bias_t": x.bias_t,
        "bias_critical": x.bias_critical, "rmse": x.rmse, "sd": report.loglik_sd, "nse": x.nse,
        "ratio": x.ratio, "z_rms": x.z_rms, "honest_range": list(x.honest_range),
        "corrected_error": x.corrected_error, "beyond_two_nse": x.beyond_two_nse, "k_hat": report.k_hat, "ess": float(report.ess.mean()),
        "verdict": report.verdict, "reason": report.reason, "seconds": seconds,
        "errors": x.errors.tolist(), "single_nse": report.single_nse.tolist(),
    }


def write(cells, n_seeds):
    lines = [
        "# The health check against the exact log-likelihood", "",
        f"`experiments/check_against_exact.py`, {n_seeds} seeds per design, one data set per design (seed 2026), "
        f"tail 2000 draws, no NSE grid; machine: {cpu_model()} (2 cores, shared). Exact value: the check's "
        "reference (grid filter to 1e-8). NSE: root mean square of the runs' reported NSEs; z: error / own NSE; "
        "honest: the 99% range of RMSE / NSE and of rms z for an honest NSE (chi-square with R dof); abs(z) > 2: "
        "runs whose error exceeds twice their own NSE (about 5% for an honest, normal error). Seconds: the whole "
        "check, compilation included, on a machine shared with other jobs.", "",
        "| design | T | S | bias (se) | t | RMSE | sd | NSE | RMSE / NSE | rms z | honest | abs(z) > 2 | corrected "
        "mean error | k-hat | verdict | s |",
        "|---|---:|---:|---|---:|---:|---:|---:|---:|---:|---|---:|---:|---:|---|---:|",
    ]
    for c in cells:
        low, high = c["honest_range"]
        lines.append(f"| {c['model']} | {c['T']} | {c['n_draws']} | {c['bias']:+.3f} ({c['bias_se']:.3f}) | "
                     f"{c['bias_t']:.1f} | {c['rmse']:.3f} | {c['sd']:.3f} | {c['nse']:.3f} | {c['ratio']:.2f} | "
                     f"{c['z_rms']:.2f} | {low:.2f}-{high:.2f} | {c['beyond_two_nse']} of {c['seeds']} | "
                     f"{c['corrected_error']:+.3f} | {c['k_hat']:.2f} | {c['verdict']} | "
                     f"{c['seconds']:.0f} |")
    lines += ["", "Verdicts:", ""]
    lines += [f"* {c['model']} T = {c['T']}, S = {c['n_draws']}: {c['verdict']} -- {c['reason']}" for c in cells]
    (RESULTS / "check_against_exact.md").write_text("\n".join(lines) + "\n")
    (RESULTS / "check_against_exact.json").write_text(json.dumps({"seeds": n_seeds, "cells": cells}, indent=1))


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--seeds", type=int, default=40)
    args = parser.parse_args()
    designs = [d for d in DESIGNS if d[2] == 500] if args.quick else DESIGNS
    n_seeds = 4 if args.quick else args.seeds
    cells = []
    for model, params, n_periods, n_draws in designs:
        cell = measure(model, params, n_periods, n_draws, n_seeds)
        cells.append(cell)
        print(json.dumps({k: v for k, v in cell.items() if k not in ("errors", "single_nse")}), flush=True)
    if not args.quick:
        write(cells, n_seeds)


if __name__ == "__main__":
    main()
