"""Start-up times a new user meets: ``import smle``, ``smle --help``, ``smle models``, and a first
``smle.fit("sv", y)`` at T = 2000 in a fresh process, with an empty compilation cache and with a
warm one.

Each figure is the median of ``--repeats`` fresh processes (wall clock, including Python's own
start-up, which is measured alone as ``python -c pass``). The cache is a temporary folder
(``SMLE_CACHE_DIR``): emptied before each cold run, kept for the warm runs.

    python experiments/bench_startup.py [--repeats 3]

Writes experiments/results/bench_startup.json and .md.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

RESULTS = Path(__file__).parent / "results"
ROOT = Path(__file__).resolve().parents[1]
TARGETS = {"import smle": 1.5, "smle --help": 0.5, "first fit sv T=2000, empty cache": 5.0}

FIT = """
import time, smle
y, _ = smle.simulate("sv", dict(mu=-0.5, phi=0.95, sigma_eta=0.26), 2000, seed=1)
started = time.perf_counter()
result = smle.fit("sv", y, n_draws=64, seed=0, verbose=True)  # says how long the first evaluation took
print(time.perf_counter() - started, result.iterations, result.n_evaluations)
"""


def _run(command: list[str], cache: Path) -> tuple[float, str]:
    """Wall seconds, and standard output followed by the seconds of the fit's first evaluation
    (compilation included; from its "compiled and evaluated in" line) when there is one."""
    environment = {**os.environ, "SMLE_CACHE_DIR": str(cache), "PYTHONPATH": str(ROOT)}
    started = time.perf_counter()
    done = subprocess.run(command, capture_output=True, text=True, env=environment, check=True)
    seconds = time.perf_counter() - started
    first = [line.split()[4] for line in done.stderr.splitlines() if line.startswith("compiled and evaluated in")]
    return seconds, done.stdout + (" " + first[0] if first else "")


def _console_script() -> list[str]:
    """``smle`` as installed (a console script), else the module."""
    script = shutil.which("smle")
    return [script] if script else [sys.executable, "-m", "smle.cli"]


def measure(repeats: int) -> dict:
    cases = {
        "python -c pass": [sys.executable, "-c", "pass"],
        "import smle": [sys.executable, "-c", "import smle"],
        "python -m smle.cli --help": [sys.executable, "-m", "smle.cli", "--help"],
        "smle --help": _console_script() + ["--help"],
        "smle models": _console_script() + ["models"],
    }
    out: dict = {}
    with tempfile.TemporaryDirectory() as folder:
        cache = Path(folder) / "cache"
        for name, command in cases.items():
            out[name] = statistics.median(_run(command, cache)[0] for _ in range(repeats))
        cold, cold_fit, cold_first = [], [], []
        for _ in range(repeats):
            shutil.rmtree(cache, ignore_errors=True)
            seconds, text = _run([sys.executable, "-c", FIT], cache)
            cold.append(seconds)
            cold_fit.append(float(text.split()[0]))
            cold_first.append(float(text.split()[-1]))
        warm, warm_fit, warm_first = [], [], []
        for _ in range(repeats):
            seconds, text = _run([sys.executable, "-c", FIT], cache)
            warm.append(seconds)
            warm_fit.append(float(text.split()[0]))
            warm_first.append(float(text.split()[-1]))
        steps = text.split()[1:3]
    out["first fit sv T=2000, empty cache"] = statistics.median(cold)
    out["  of which smle.fit itself"] = statistics.median(cold_fit)
    out["  of which its first evaluation (compilation)"] = statistics.median(cold_first)
    out["first fit sv T=2000, warm cache"] = statistics.median(warm)
    out["  of which smle.fit itself (warm)"] = statistics.median(warm_fit)
    out["  of which its first evaluation (warm cache)"] = statistics.median(warm_first)
    out["fit: L-BFGS steps, evaluations"] = " ".join(steps)
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    load = os.getloadavg()
    figures = measure(args.repeats)
    facts = {"machine": f"{platform.processor() or platform.machine()}, {os.cpu_count()} cores",
             "python": platform.python_version(), "load_average_before": [round(v, 2) for v in load],
             "load_average_after": [round(v, 2) for v in os.getloadavg()], "repeats": args.repeats,
             "seconds": {k: (round(v, 3) if isinstance(v, float) else v) for k, v in figures.items()},
             "targets_seconds": TARGETS}
    RESULTS.mkdir(exist_ok=True)
    (RESULTS / "bench_startup.json").write_text(json.dumps(facts, indent=1) + "\n")
    lines = ["# Start-up times (fresh processes, wall clock, median of "
             f"{args.repeats})", "",
             f"Machine: {facts['machine']}; Python {facts['python']}; load average before "
             f"{facts['load_average_before']}, after {facts['load_average_after']}.", "",
             "| what | seconds | target |", "|---|---:|---:|"]
    for name, value in figures.items():
        shown = f"{value:.2f}" if isinstance(value, float) else value
        target = TARGETS.get(name)
        lines.append(f"| {name} | {shown} | {'' if target is None else f'< {target}'} |")
    (RESULTS / "bench_startup.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
