"""Speed of a full fit of `sv` with standard errors at T = 2000, S = 64.

Measures, on this machine:
* the first `smle.fit` call in a fresh process with an empty persistent compilation cache
  (compilation included), and the import time of smle;
* the same in a fresh process with the cache warm;
* later calls in the same process (new data of the same shape, new seeds): seconds per fit,
  L-BFGS steps and value-and-gradient evaluations per fit (the Hessian's 2k included).

Targets (issue 3): under 1 s after compilation, under 5 s for the first call in a fresh
process with an empty cache, on a 2-core CPU. Results: experiments/results/bench_fit.{json,md}.

    python experiments/bench_fit.py
"""

from __future__ import annotations

import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from machine import cpu_model  # experiments/machine.py

RESULTS = Path(__file__).resolve().parent / "results"
DESIGN = dict(mu=-7.36, phi=0.95, sigma_eta=0.26)

CHILD = r"""
import json, sys, time
started = time.perf_counter()
import smle
imported = time.perf_counter()
y, _ = smle.simulate("sv", {design}, 2000, seed=1)
t0 = time.perf_counter()
result = smle.fit("sv", y, n_draws=64, seed=0)
first = time.perf_counter() - t0
runs = []
for replication in range({n_repeats}):
    y, _ = smle.simulate("sv", {design}, 2000, seed=100 + replication)
    t0 = time.perf_counter()
    r = smle.fit("sv", y, n_draws=64, seed=replication)
    runs.append(dict(seconds=time.perf_counter() - t0, steps=r.iterations, evaluations=r.n_evaluations,
                     converged=r.converged))
print(json.dumps(dict(import_seconds=imported - started, first_fit_seconds=first, runs=runs)))
"""


def _child(cache_dir: str, n_repeats: int) -> dict:
    env = dict(os.environ, SMLE_CACHE_DIR=cache_dir)
    code = CHILD.format(design=repr(DESIGN), n_repeats=n_repeats)
    out = subprocess.run([sys.executable, "-c", code], env=env, check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def _machine() -> dict:
    import jax

    return dict(cpu=cpu_model(), cores=os.cpu_count(), python=platform.python_version(), jax=jax.__version__,
                load_average=os.getloadavg(), date=time.strftime("%Y-%m-%d %H:%M"))


def main() -> None:
    with tempfile.TemporaryDirectory() as cache:
        cold = _child(cache, n_repeats=10)
        warm = _child(cache, n_repeats=0)
    runs = cold["runs"]
    seconds = sorted(r["seconds"] for r in runs)
    median = seconds[len(seconds) // 2]
    evaluations = sorted(r["evaluations"] for r in runs)[len(runs) // 2]
    steps = sorted(r["steps"] for r in runs)[len(runs) // 2]
    report = dict(machine=_machine(), design=DESIGN, T=2000, n_draws=64, cold_cache=cold, warm_cache=warm,
                  median_seconds_after_compile=median, median_evaluations=evaluations, median_steps=steps,
                  all_converged=all(r["converged"] for r in runs))
    RESULTS.mkdir(exist_ok=True)
    (RESULTS / "bench_fit.json").write_text(json.dumps(report, indent=1))
    m = report["machine"]
    lines = [
        "# Full fit of `sv` with standard errors (T = 2000, S = 64)",
        "",
        f"Machine: {m['cpu']}, {m['cores']} cores, Python {m['python']}, JAX {m['jax']}; "
        f"{m['date']}; load average at the end {m['load_average'][0]:.2f}.",
        "",
        "| measure | result | target |",
        "|---|---|---|",
        f"| first fit in a fresh process, empty compilation cache (compile included) | {cold['first_fit_seconds']:.2f} s | under 5 s |",
        f"| first fit in a fresh process, warm compilation cache | {warm['first_fit_seconds']:.2f} s | |",
        f"| import smle | {cold['import_seconds']:.2f} s | |",
        f"| fit after compilation (median of {len(runs)}, new data and seeds) | {median:.2f} s | under 1 s |",
        f"| L-BFGS steps per fit (median) | {steps} | |",
        f"| value-and-gradient evaluations per fit, Hessian included (median) | {evaluations} | |",
        f"| all fits converged | {report['all_converged']} | |",
    ]
    (RESULTS / "bench_fit.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
