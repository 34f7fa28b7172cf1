"""Benchmark: the exact grid likelihood (smle.engine.exact) for `sv` and `garch-mix`.

What it measures, on series simulated by smle.simulate (seed 1) at T in {1000, 2000, 8000, 100000}:

1. ``smle.loglik(method="exact")`` (``exact_filter`` inside): grid choice (probe of log g_t), the filter on the chosen grid and the
   accuracy check on the next coarser grid; the grid size chosen and the error bound reported;
   seconds for the first call (compiling) and the median of later calls.
2. The fast path an optimiser uses: ``loglik_on_grid`` with the grid fixed, the model's
   ``prepare`` and ``log_obs_density`` inside one ``jax.jit``; median milliseconds of >= 5
   calls after a warm-up; and the same for ``jax.value_and_grad``.
4. ``smle.fit(method="exact")`` with standard errors at T = 2000: the first fit of the process
   (compiling, or reading the persistent compilation cache) and the median of later fits.
3. EIS, ``smle.loglik(..., n_draws=64, method="eis")``, at T = 2000 and 8000 (median of 3 after a warm-up),
   with its value against the exact one and its reported NSE.

Designs: sv (mu = -0.4, phi = 0.98, sigma_eta = 0.15; returns in percent); garch-mix, ig link
(mu = 0.03, ar1 = 0.02, omega = 0.02, alpha = 0.06, beta = 0.92, gamma = -0.3, lambda = 1.5,
rho = 0.5).

The machine is shared by several processes: the load average is recorded with the results.

Run: python experiments/bench_exact.py [--quick]
Results: experiments/results/bench_exact.json and experiments/results/bench_exact.md
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import statistics
import sys
import time
from pathlib import Path

import jax
import jax.numpy as jnp
import numpy as np

import smle
from smle.engine import exact

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from machine import cpu_model  # noqa: E402  (experiments/machine.py)

DESIGNS = {
    "sv": dict(mu=-0.4, phi=0.98, sigma_eta=0.15),
    "garch-mix": dict(mu=0.03, ar1=0.02, omega=0.02, alpha=0.06, beta=0.92, gamma=-0.3, rho=0.5, **{"lambda": 1.5}),
}
PERIODS = (1000, 2000, 8000, 100_000)
EIS_PERIODS = (2000, 8000)


def median_seconds(fn, repeats):
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        jax.block_until_ready(fn())
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def one(name, params, n_periods, repeats):
    model = smle.get_model(name)
    y, _ = smle.simulate(model, params, n_periods, seed=1)
    y = jnp.asarray(y)
    pj = {k: jnp.asarray(v, float) for k, v in params.items()}
    data = model.prepare(pj, y)

    def run():  # the public entry point: grid choice, filter, accuracy check
        return smle.loglik(model, params, np.asarray(y), method="exact")

    start = time.perf_counter()
    result = run()
    first = time.perf_counter() - start
    checked = median_seconds(lambda: run().value, max(2, repeats // 3))
    out = exact.exact_filter(model.latent(pj), lambda x: model.log_obs_density(pj, data, x), n_periods)
    spec = out.spec

    def loglik(p):
        log_g = model.log_obs_density(p, model.prepare(p, y), jnp.broadcast_to(spec.points(), (n_periods, spec.size)))
        return exact.loglik_on_grid(model.latent(p), log_g, spec)

    fast = jax.jit(loglik)
    both = jax.jit(jax.value_and_grad(loglik))
    jax.block_until_ready(fast(pj))
    jax.block_until_ready(both(pj))
    row = {
        "model": name, "T": n_periods, "grid_size": spec.size, "band": spec.band,
        "grid_range": [round(spec.lower, 3), round(spec.upper, 3)],
        "loglik": float(result.value), "error_bound": result.error_bound,
        "exact_filter_first_s": round(first, 3), "exact_filter_s": round(checked, 4),
        "loglik_ms": round(1e3 * median_seconds(lambda: fast(pj), repeats), 3),
        "value_and_grad_ms": round(1e3 * median_seconds(lambda: both(pj), repeats), 3),
    }
    if n_periods in EIS_PERIODS:
        smle.loglik(model, params, np.asarray(y), n_draws=64, seed=0, method="eis")
        eis = None

        def eis_run():
            nonlocal eis
            eis = smle.loglik(model, params, np.asarray(y), n_draws=64, seed=0, method="eis")
            return eis.value

        row["eis_ms"] = round(1e3 * median_seconds(eis_run, 3), 2)
        row["eis_minus_exact"] = float(eis.value) - float(result.value)
        row["eis_nse"] = float(eis.nse)
    return row


def fit_timing(name, params, n_periods=2000, repeats=3):
    y, _ = smle.simulate(name, params, n_periods, seed=1)
    start = time.perf_counter()
    result = smle.fit(name, y, method="exact")
    first = time.perf_counter() - start
    later = median_seconds(lambda: smle.fit(name, y, method="exact").loglik, repeats)
    return {"model": name, "T": n_periods, "fit_first_s": round(first, 2), "fit_s": round(later, 3),
            "converged": bool(result.converged), "grid_size": result.eis["grid_size"]}


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true", help="T up to 8000, fewer repeats")
    args = parser.parse_args()
    periods = PERIODS[:3] if args.quick else PERIODS
    rows = []
    for name, params in DESIGNS.items():
        for n_periods in periods:
            rows.append(one(name, params, n_periods, 3 if n_periods > 10_000 else 10))
            print(rows[-1], flush=True)
    fits = [fit_timing(name, params) for name, params in DESIGNS.items()]
    print(fits, flush=True)
    meta = {"date": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
            "cpu": cpu_model(), "cores": os.cpu_count(), "load_average": os.getloadavg(),
            "jax": jax.__version__, "designs": DESIGNS}
    out_dir = HERE / "results"
    (out_dir / "bench_exact.json").write_text(json.dumps({"meta": meta, "rows": rows, "fits": fits}, indent=2))
    lines = [
        "# Exact grid likelihood: speed and accuracy",
        "",
        f"{meta['date']}, {meta['cpu']}, {meta['cores']} cores, load average {meta['load_average'][0]:.1f} "
        "(shared machine: timings are inflated by other processes).",
        "",
        "| model | T | G | band | error bound | loglik ms | value+grad ms | checked s | EIS(64) ms | EIS - exact | EIS NSE |",
        "|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in rows:
        eis = (f"{r['eis_ms']} | {r['eis_minus_exact']:.3f} | {r['eis_nse']:.3f}" if "eis_ms" in r else "- | - | -")
        lines.append(f"| {r['model']} | {r['T']} | {r['grid_size']} | {r['band']} | {r['error_bound']:.1e} | "
                     f"{r['loglik_ms']} | {r['value_and_grad_ms']} | {r['exact_filter_s']} | {eis} |")
    lines += ["", "loglik ms: the fixed-grid fast path (prepare + density + filter, jitted). checked s: "
              "smle.loglik(method='exact'): grid choice + filter + coarser-grid check, after the first call.", "",
              "| model | T | exact fit with standard errors, first in the process s | later fits s | G |",
              "|---|---|---|---|---|"]
    lines += [f"| {f['model']} | {f['T']} | {f['fit_first_s']} | {f['fit_s']} | {f['grid_size']} |" for f in fits]
    (out_dir / "bench_exact.md").write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
