"""Benchmark: the guided particle filter of smle.diagnostics.filtering (filtered factor, predictive densities, PITs).

What it measures: ``smle.diagnostics.filtering.compiled_filter(model, n_particles)`` called directly with
``block_until_ready``, T = 2000 periods, 2000 particles, resampling when the ESS falls below
half the particles; the median of ``--repeats`` runs with fresh seeds after one compiling
call (whose time is reported as compile + first run). Headline target: `sv`, under 1 s after
compilation. `realized-sv` and `garch-mix` (ig link) are timed for comparison.

The machine is shared: the script records the load averages and the CPU time that other
processes used during each timed section (from /proc/stat minus this process's own CPU time),
and says so in the results file.

Run: python experiments/bench_filter.py [--repeats 7]
Results: experiments/results/bench_filter.md and experiments/results/bench_filter.json
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from machine import cpu_model  # noqa: E402  (experiments/machine.py)

N_PERIODS = 2000
N_PARTICLES = 2000
TARGET_S = 1.0
SV = {"mu": -7.36 + 2 * 4.605170185988092, "phi": 0.95, "sigma_eta": 0.26}  # percent returns
CASES = (
    ("sv", {}, SV),
    ("realized-sv", {}, {**SV, "xi": -0.3, "sigma_u": 0.4}),
    ("garch-mix", {"link": "ig"}, {"mu": 0.03, "ar1": 0.05, "omega": 0.05, "alpha": 0.08, "beta": 0.9,
                                   "gamma": -0.3, "lambda": 1.5, "rho": 0.8}),
)


def _busy_seconds() -> float:
    fields = [int(v) for v in Path("/proc/stat").read_text().splitlines()[0].split()[1:]]
    user, nice, system, _idle, _iowait, irq, softirq = fields[:7]
    return (user + nice + system + irq + softirq) / os.sysconf("SC_CLK_TCK")


def _own_cpu() -> float:
    t = os.times()
    return t.user + t.system


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args()

    import jax
    import jax.numpy as jnp

    import smle
    from smle.diagnostics.filtering import compiled_filter

    rows = []
    for name, options, params in CASES:
        model = smle.get_model(name, **options)
        y, _ = smle.simulate(model, params, N_PERIODS, seed=1)
        p = {k: jnp.asarray(v, float) for k, v in params.items()}
        y = jnp.asarray(y)
        run = compiled_filter(model, N_PARTICLES)
        start = time.perf_counter()
        jax.block_until_ready(run(p, y, jax.random.PRNGKey(0), 0.5))
        first = time.perf_counter() - start
        load_before = os.getloadavg()[0]
        busy0, own0, wall0 = _busy_seconds(), _own_cpu(), time.perf_counter()
        times = []
        for seed in range(1, args.repeats + 1):
            start = time.perf_counter()
            jax.block_until_ready(run(p, y, jax.random.PRNGKey(seed), 0.5))
            times.append(time.perf_counter() - start)
        wall = time.perf_counter() - wall0
        others = max(0.0, (_busy_seconds() - busy0) - (_own_cpu() - own0)) / wall
        rows.append({"model": model.name + (f" ({options['link']})" if options else ""), "median_s": statistics.median(times),
                     "min_s": min(times), "max_s": max(times), "first_call_s": first,
                     "load_before": load_before, "load_after": os.getloadavg()[0], "other_cores": others})
        print(rows[-1], flush=True)

    headline = rows[0]["median_s"]
    loaded = any(r["other_cores"] > 0.3 or r["load_before"] > 1.0 for r in rows)
    record = {
        "date": datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d %H:%M UTC"),
        "machine": {"cpu": cpu_model(), "cores": os.cpu_count(), "python": platform.python_version(),
                    "jax": jax.__version__},
        "T": N_PERIODS, "particles": N_PARTICLES, "repeats": args.repeats, "rows": rows,
        "target_s": TARGET_S, "met": headline < TARGET_S, "loaded": loaded,
    }
    results = HERE / "results"
    (results / "bench_filter.json").write_text(json.dumps(record, indent=1))
    m = record["machine"]
    lines = [
        "# bench_filter: the guided particle filter",
        "",
        f"Machine: {m['cpu']}, {m['cores']} cores, no GPU; Python {m['python']}, JAX {m['jax']}, float64; "
        f"run {record['date']}. T = {N_PERIODS}, {N_PARTICLES} particles, resampling when ESS < 0.5 N; "
        f"median of {args.repeats} runs with fresh seeds after a compiling call.",
        "",
        ("The machine was shared with other work while these timings were taken (see the load columns: "
         "load average, and cores' worth of CPU used by other processes during the timed runs); absolute "
         "times are inflated by it." if loaded else "The machine was otherwise idle (see the load columns)."),
        "",
        "| model | median s | min s | max s | compile + first run s | load before | load after | other processes (cores) |",
        "|---|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for r in rows:
        lines.append(f"| {r['model']} | {r['median_s']:.3f} | {r['min_s']:.3f} | {r['max_s']:.3f} | "
                     f"{r['first_call_s']:.2f} | {r['load_before']:.2f} | {r['load_after']:.2f} | {r['other_cores']:.2f} |")
    lines += ["", f"Target: `sv`, T = {N_PERIODS} with {N_PARTICLES} particles, under {TARGET_S:.0f} s after "
              f"compilation. Measured: {headline:.3f} s ({'met' if record['met'] else 'missed'})."]
    (results / "bench_filter.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
