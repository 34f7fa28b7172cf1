"""Benchmark: `smle.loglik(method="eis")` per call at its defaults, one-dimensional against k-dimensional states.

Issue 16's speed targets, as a user meets them: the time of one `smle.loglik` call (Python
included, after compilation; median CPU and wall seconds of 7 calls with seeds 0-6) at T = 2000 for
`sv`, `sv-2factor` and `factor-sv` with N = 10 (k = 11; `n_draws=64`, the fewest draws its basis
allows being 46), with each scoring where it runs, and with the 64 path draws that were the default
when the targets were set. Run three times in a row (``--passes``) to show the spread on a shared
machine; ``uptime`` is recorded.

    python experiments/bench_loglik_defaults.py    # writes results/bench_loglik_defaults.md and .json
"""

from __future__ import annotations

import argparse
import json
import statistics
import time

import numpy as np

import smle
from eis_accuracy import RESULTS
from particle_eis import load

T = 2000
SV = dict(mu=0.2, phi=0.98, sigma_eta=0.6 * float(np.sqrt(1 - 0.98**2)))
SV2 = dict(mu=0.2, phi1=0.98, sigma_eta1=0.6 * float(np.sqrt(1 - 0.98**2)), phi2=0.5,
           sigma_eta2=0.4 * float(np.sqrt(0.75)))


def factor_design():
    model = smle.get_model("factor-sv", n_series=10)
    values = {"phi_f": 0.95}
    for i in range(1, 11):
        values.update({f"a_{i}": 0.0, f"b_{i}": 0.5, f"phi_{i}": 0.9, f"sigma_eta_{i}": 0.3})
    return model, {name: values[name] for name in model.param_names}


def timed(model, params, y, **options):
    smle.loglik(model, params, y, method="eis", seed=100, **options)  # compile
    cpu, wall = [], []
    for seed in range(7):
        start_cpu, start = time.process_time(), time.perf_counter()
        smle.loglik(model, params, y, method="eis", seed=seed, **options)
        cpu.append(time.process_time() - start_cpu)
        wall.append(time.perf_counter() - start)
    return statistics.median(cpu), statistics.median(wall)


def cases():
    factor, factor_params = factor_design()
    data = {name: smle.simulate(model, params, T, seed=1)[0]
            for name, model, params in (("sv", "sv", SV), ("sv-2factor", "sv-2factor", SV2),
                                        ("factor-sv N=10", factor, factor_params))}
    return [
        ("sv", "sv", SV, data["sv"], "particles (default)", dict(scoring="particles")),
        ("sv", "sv", SV, data["sv"], "paths (32 fit / 512 score)", dict(scoring="paths")),
        ("sv", "sv", SV, data["sv"], "paths S = 64", dict(scoring="paths", n_draws=64, n_score_draws=64)),
        ("sv-2factor", "sv-2factor", SV2, data["sv-2factor"], "particles (default)", dict(scoring="particles")),
        ("sv-2factor", "sv-2factor", SV2, data["sv-2factor"], "paths (32 fit / 512 score)", dict(scoring="paths")),
        ("sv-2factor", "sv-2factor", SV2, data["sv-2factor"], "paths S = 64",
         dict(scoring="paths", n_draws=64, n_score_draws=64)),
        ("factor-sv N=10", factor, factor_params, data["factor-sv N=10"], "particles, n_draws = 64",
         dict(scoring="particles", n_draws=64)),
    ]


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--passes", type=int, default=3)
    args = parser.parse_args()
    rows, loads = [], [load()]
    for number in range(args.passes):
        for label, model, params, y, setting, options in cases():
            cpu, wall = timed(model, params, y, **options)
            rows.append({"pass": number, "model": label, "setting": setting, "cpu": cpu, "wall": wall})
            print(rows[-1], flush=True)
        loads.append(load())
    (RESULTS / "bench_loglik_defaults.json").write_text(json.dumps({"rows": rows, "loads": loads}, indent=1))
    lines = ["# `smle.loglik(method=\"eis\")` per call, T = 2000", "", __doc__.split("\n\n")[1].replace("\n", " "), "",
             "Load (`uptime`):", "", *[f"    {line}" for line in loads], "",
             "| model | setting | CPU s per pass | wall s per pass |", "|---|---|---|---|"]
    keys = list(dict.fromkeys((row["model"], row["setting"]) for row in rows))
    for model, setting in keys:
        mine = [row for row in rows if (row["model"], row["setting"]) == (model, setting)]
        cpu = ", ".join(f"{row['cpu']:.3f}" for row in mine)
        wall = ", ".join(f"{row['wall']:.3f}" for row in mine)
        lines.append(f"| {model} | {setting} | {cpu} | {wall} |")
    (RESULTS / "bench_loglik_defaults.md").write_text("\n".join(lines) + "\n" + FINDINGS)


FINDINGS = """
Measured 2026-12-04, quiet machine (load under 1.2). Issue 16's targets:

* `sv-2factor` within 3 times one-dimensional `sv`: with each at its default (particle scoring),
  3.6, 3.2 and 3.0 times by CPU and 3.7, 3.2 and 2.8 times by wall time over the three passes: at
  the target, not reliably under it (**missed** by a little). With the 64 path draws the target
  was set at, 7.7 to 8.3 times (**missed**; 13-17 times in `bench_eis_multi.md`, measured under load
  against the bare kernel). One k = 2 EIS iteration costs about 7 ms (profiled here: backward scan
  2.4 ms, regression 2.8 ms) against 1.6 ms for the scalar engine (`bench_eis_multi.md`); particle
  scoring narrows the gap because its pass costs about the same for k = 1 and 2.
* `factor-sv` with N = 10 (k = 11) under 1 s after compilation: 0.70 s wall (1.0 s CPU: XLA uses
  both cores) with particle scoring and 64 fitting draws: **met** by wall time, the measure of
  `bench_eis_multi.md` (1.06 s there with paths under load). Before this change the call did not
  return at all on this machine: two batched LAPACK solves in flight deadlocked jaxlib's thread
  pool (now solved by array operations, `smle.engine.multi_basis.column_cholesky`).
"""


if __name__ == "__main__":
    main()
