"""Benchmark: smle.filter_factor's exact route against its particle route, and the exact factor-path draw.

What it measures, T = 2000, per model (`sv`, `realized-sv`, `garch-mix` with the ig link, `ar1-noise`):
the public call ``smle.filter_factor(model, params, y, method=...)`` with method "exact" (the Kalman
filter or the grid filter with the grid's choice and accuracy check, the backward smoothing pass,
bands and PITs) and "particles" (2000 particles), and
``smle.diagnostics.factor_path.exact_posterior_path`` (one path by backward simulation, as diagnose
draws it); the median of ``--repeats`` calls after one compiling call (reported as first call).
The machine is shared: load averages are recorded with the timings.

Run: python experiments/bench_filter_exact.py [--repeats 5]
Results: experiments/results/bench_filter_exact.md
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from machine import cpu_model  # noqa: E402  (experiments/machine.py)

from bench_filter import CASES as PARTICLE_CASES  # noqa: E402  (the same three models and parameters)

N_PERIODS = 2000
CASES = (*PARTICLE_CASES, ("ar1-noise", {}, {"mu": 0.5, "phi": 0.9, "sigma_eta": 0.4, "sigma_eps": 0.6}))


def _timed(call, repeats):
    start = time.perf_counter()
    out = call()
    first = time.perf_counter() - start
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        call()
        times.append(time.perf_counter() - start)
    return out, first, statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()

    import jax

    import smle
    from smle.diagnostics.factor_path import exact_posterior_path

    lines = [
        "# bench_filter_exact: filter_factor exact and particle routes, and the exact path draw",
        "",
        f"Machine: {cpu_model()}, {os.cpu_count()} cores, no GPU; Python {platform.python_version()}, JAX "
        f"{jax.__version__}, float64; run {datetime.datetime.now(datetime.UTC):%Y-%m-%d %H:%M} UTC. T = {N_PERIODS}; "
        f"median of {args.repeats} calls after a first (compiling) call; seconds.",
        "",
        "| model | engine, grid points | exact median (first) | particles median (first) | path draw median (first, "
        "grid points) | load before | load after |",
        "|---|---|---:|---:|---:|---:|---:|",
    ]
    for name, options, params in CASES:
        model = smle.get_model(name, **options)
        y, _ = smle.simulate(model, params, N_PERIODS, seed=1)
        load_before = os.getloadavg()[0]
        exact, exact_first, exact_median = _timed(lambda: smle.filter_factor(model, params, y), args.repeats)
        _, pf_first, pf_median = _timed(lambda: smle.filter_factor(model, params, y, method="particles"), args.repeats)
        (_, size), path_first, path_median = _timed(lambda: exact_posterior_path(model, params, y, 0), args.repeats)
        label = name + (f" ({options['link']})" if options else "")
        lines.append(f"| {label} | {exact.engine}, {exact.grid_size} | {exact_median:.3f} ({exact_first:.2f}) | "
                     f"{pf_median:.3f} ({pf_first:.2f}) | {path_median:.3f} ({path_first:.2f}, {size}) | "
                     f"{load_before:.1f} | {os.getloadavg()[0]:.1f} |")
        print(lines[-1], flush=True)
    lines += ["", "A load average above 2 on this 2-core machine means other work shared it: times are inflated."]
    (HERE / "results" / "bench_filter_exact.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
