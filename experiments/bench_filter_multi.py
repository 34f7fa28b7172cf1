"""Benchmark: the guided particle filter in k dimensions (smle.diagnostics.filtering_multi) against
the one-dimensional filter on `sv`.

What it measures: ``compiled_filter_multi(model, n_particles)`` (``compiled_filter`` for `sv`) called
directly with ``block_until_ready``, T = 2000 periods, 2000 particles, resampling when the ESS falls
below half the particles; the median of ``--repeats`` runs with fresh seeds after one compiling call
(reported as compile + first run). The smoothed factor (one EIS run) is not included. The machine
is shared: the load average before and after each case is recorded.

Run: python experiments/bench_filter_multi.py [--repeats 5]
Results: experiments/results/bench_filter_multi.md
"""

from __future__ import annotations

import argparse
import datetime
import os
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from machine import cpu_model  # noqa: E402  (experiments/machine.py)

N_PERIODS = 2000
N_PARTICLES = 2000
SV = {"mu": -7.36 + 2 * 4.605170185988092, "phi": 0.95, "sigma_eta": 0.26}


def _factor_sv(n):
    params = {"phi_f": 0.95}
    for i in range(1, n + 1):
        params.update({f"a_{i}": 0.1 * i, f"b_{i}": 0.5, f"phi_{i}": 0.9, f"sigma_eta_{i}": 0.3})
    return params


CASES = (
    ("sv", {}, SV),
    ("sv-2factor", {}, dict(mu=0.2, phi1=0.98, sigma_eta1=0.12, phi2=0.5, sigma_eta2=0.35)),
    ("var1-noise", {"n_series": 2}, dict(mu_1=0.5, mu_2=-0.3, phi_1=0.9, phi_2=0.6, sigma_eta_1=0.4,
                                         sigma_eta_2=0.5, sigma_eps_1=0.6, sigma_eps_2=0.3)),
    ("factor-sv", {"n_series": 2}, _factor_sv(2)),
    ("factor-sv", {"n_series": 10}, _factor_sv(10)),
)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()

    import jax
    import jax.numpy as jnp

    import smle
    from smle.diagnostics.filtering import compiled_filter
    from smle.diagnostics.filtering_multi import compiled_filter_multi

    lines = ["# bench_filter_multi: the guided particle filter in k dimensions", "",
             f"Machine: {cpu_model()}, {os.cpu_count()} cores; run "
             f"{datetime.datetime.now(datetime.timezone.utc):%Y-%m-%d %H:%M} UTC. T = {N_PERIODS}, {N_PARTICLES} "
             f"particles, resampling when ESS < 0.5 N; median of {args.repeats} runs after a compiling call. The "
             "machine was shared with other work (load columns); absolute times are inflated by it.", "",
             "| model | k | median s | compile + first run s | load before | load after |", "|---|---:|---:|---:|---:|---:|"]
    for name, options, params in CASES:
        model = smle.get_model(name, **options)
        y, _ = smle.simulate(model, params, N_PERIODS, seed=1)
        p, y = {k: jnp.asarray(v, float) for k, v in params.items()}, jnp.asarray(y)
        run = (compiled_filter_multi if model.state_dim > 1 else compiled_filter)(model, N_PARTICLES)
        start = time.perf_counter()
        jax.block_until_ready(run(p, y, jax.random.PRNGKey(0), 0.5))
        first = time.perf_counter() - start
        load_before = os.getloadavg()[0]
        times = []
        for seed in range(1, args.repeats + 1):
            start = time.perf_counter()
            jax.block_until_ready(run(p, y, jax.random.PRNGKey(seed), 0.5))
            times.append(time.perf_counter() - start)
        label = name + "".join(f" {k}={v}" for k, v in options.items())
        lines.append(f"| {label} | {max(model.state_dim, 1)} | {statistics.median(times):.3f} | {first:.2f} | "
                     f"{load_before:.2f} | {os.getloadavg()[0]:.2f} |")
        print(lines[-1], flush=True)
    (HERE / "results" / "bench_filter_multi.md").write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
