"""Speed of a full EIS fit with standard errors at T = 2000: ``sv`` and ``garch-mix``.

Measures, on this machine, in a fresh process per design with an empty persistent compilation
cache: the first ``smle.fit(..., method="eis")`` (compilation included), then later fits in
the same process (new data of the same shape, new seeds): wall seconds and process CPU seconds
per fit (the CPU time is less moved by other jobs on a shared machine), L-BFGS steps,
value-and-gradient evaluations (the Hessian's 2k included) and the EIS iterations of the last
evaluation. ``exact_reference=False``: the exact likelihood's own maximisation, which an EIS fit
of a one-dimensional state adds by default, is not part of the EIS fit's cost.

Targets (issue 15): after compilation, ``sv`` under 0.6 s and ``garch-mix`` under 4 s.
Results: experiments/results/bench_fit.{json,md}.

    python experiments/bench_fit.py                      # writes the results
    PYTHONPATH=<other tree> python experiments/bench_fit.py --label before --no-write
"""

from __future__ import annotations

import argparse
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
GARCH = dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.06, beta=0.90, gamma=-0.4, rho=0.5, **{"lambda": 1.5})
DESIGNS = {"sv": dict(mu=-7.36, phi=0.95, sigma_eta=0.26), "garch-mix": GARCH}
TARGETS = {"sv": 0.6, "garch-mix": 4.0}

CHILD = r"""
import json, time
import smle
model, design = {model!r}, {design!r}
y, _ = smle.simulate(model, design, 2000, seed=1)
t0 = time.perf_counter()
smle.fit(model, y, seed=0, method="eis", exact_reference=False)
first = time.perf_counter() - t0
runs = []
for replication in range({n_repeats}):
    y, _ = smle.simulate(model, design, 2000, seed=100 + replication)
    t0, c0 = time.perf_counter(), time.process_time()
    r = smle.fit(model, y, seed=replication, method="eis", exact_reference=False)
    runs.append(dict(seconds=time.perf_counter() - t0, cpu_seconds=time.process_time() - c0, steps=r.iterations,
                     evaluations=r.n_evaluations, eis_iterations=r.eis["iterations"], converged=r.converged,
                     n_draws=r.eis["n_draws"], n_score_draws=r.eis["n_score_draws"], tol=r.eis["tol"]))
print(json.dumps(dict(first_fit_seconds=first, runs=runs)))
"""


def _child(model: str, n_repeats: int) -> dict:
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, SMLE_CACHE_DIR=cache)
        code = CHILD.format(model=model, design=DESIGNS[model], n_repeats=n_repeats)
        out = subprocess.run([sys.executable, "-c", code], env=env, check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def _median(values):
    values = sorted(values)
    return values[len(values) // 2]


def _machine() -> dict:
    import jax

    return dict(cpu=cpu_model(), cores=os.cpu_count(), python=platform.python_version(), jax=jax.__version__,
                load_average=os.getloadavg(), date=time.strftime("%Y-%m-%d %H:%M"))


def main(label: str, repeats: dict, write: bool) -> None:
    report = {"label": label, "designs": {}}
    for model, n_repeats in repeats.items():
        child = _child(model, n_repeats)
        runs = child["runs"]
        report["designs"][model] = dict(
            first_fit_seconds=child["first_fit_seconds"], runs=runs,
            median_seconds=_median([r["seconds"] for r in runs]),
            median_cpu_seconds=_median([r["cpu_seconds"] for r in runs]),
            median_evaluations=_median([r["evaluations"] for r in runs]),
            median_steps=_median([r["steps"] for r in runs]),
            median_eis_iterations=_median([r["eis_iterations"] for r in runs]),
            all_converged=all(r["converged"] for r in runs))
    report["machine"] = _machine()
    m = report["machine"]
    lines = [f"# Full EIS fit with standard errors, T = 2000 ({label})", "",
             f"Machine: {m['cpu']}, {m['cores']} cores, Python {m['python']}, JAX {m['jax']}; {m['date']}; "
             f"load average at the end {m['load_average'][0]:.2f}. `experiments/bench_fit.py`; default settings "
             "of `smle.fit(..., method='eis', exact_reference=False)`.", "",
             "| design | fits | first fit (compile incl.) | wall s/fit (median) | CPU s/fit (median) | target | "
             "L-BFGS steps | evaluations | EIS iterations at the estimate | all converged |",
             "|---|---|---|---|---|---|---|---|---|---|"]
    for model, d in report["designs"].items():
        lines.append(f"| {model} | {len(d['runs'])} | {d['first_fit_seconds']:.1f} s | {d['median_seconds']:.2f} | "
                     f"{d['median_cpu_seconds']:.2f} | under {TARGETS[model]} s | {d['median_steps']} | "
                     f"{d['median_evaluations']} | {d['median_eis_iterations']} | {d['all_converged']} |")
    text = "\n".join(lines) + "\n"
    print(text)
    print(json.dumps(report))
    if write:
        (RESULTS / "bench_fit.json").write_text(json.dumps(report, indent=1))
        (RESULTS / "bench_fit.md").write_text(text)


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--label", default="warm-started EIS fixed point")
    parser.add_argument("--no-write", action="store_true")
    parser.add_argument("--repeats", type=int, default=5, help="fits after the first, per design (garch-mix: half)")
    args = parser.parse_args()
    main(args.label, {"sv": args.repeats, "garch-mix": max(2, args.repeats // 2)}, not args.no_write)
