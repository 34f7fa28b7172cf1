"""Benchmark: speed and accuracy-per-second of smle's EIS log-likelihood for `sv`.

What it measures (design mu = -7.36, phi = 0.95, sigma_eta = 0.26; data from smle.simulate):

1. smle's compiled kernel, ``smle.engine.methods.compiled_eis(model, settings)`` called directly
   with ``block_until_ready``, median of >= 20 repeats after a warm-up, at T in {500, 2000,
   8000} and S in {32, 64, 128}: with exactly 5 EIS iterations (tol = 0, max_iter = 5) and with
   the default convergence rule (tol = 1e-6, max_iter = 50; iterations used are reported).
   Headline target: T = 2000, S = 64, 5 iterations, under 6 ms.
2. Compile time, in fresh processes: ``.lower(...).compile()`` with SMLE_COMPILATION_CACHE=0,
   and the first call with an empty and with a warm persistent cache.
3. The same algorithm in NumPy (experiments/numpy_eis.py) at the same sizes; target: smle
   at least 5x faster.
4. Efficiency against a bootstrap particle filter (experiments/particle_filter.py) at
   T = 1000 and 4000: variance across seeds and bias against the grid filter (n_grid = 1000),
   times seconds per evaluation; target ratio PF / EIS >= 300 at T = 1000.

The machine is shared: before each timed section the script waits (up to a minute) until
other processes use less than half a core, measures the CPU that other processes used during
the section (from /proc/stat minus this process's own CPU time), and re-runs a section once
when that contention exceeded half a core. The load figures are written with the results.

Run: python experiments/bench_loglik.py            (about 8-10 minutes on 2 cores)
     python experiments/bench_loglik.py --quick    (a few seconds per section, for checking)
Results: experiments/results/bench_loglik.json and experiments/results/bench_loglik.md
"""

from __future__ import annotations

import argparse
import datetime
import json
import math
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from machine import cpu_model  # experiments/machine.py

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

DESIGN = {"mu": -7.36, "phi": 0.95, "sigma_eta": 0.26}
SPEED_PERIODS = (500, 2000, 8000)
SPEED_DRAWS = (32, 64, 128)
HEADLINE = {"T": 2000, "S": 64, "target_ms": 6.0}
SPEEDUP_TARGET = 5.0
EFFICIENCY_PERIODS = (1000, 4000)
EIS_EFFICIENCY_DRAWS = (32, 64, 128)
PF_PARTICLES = {1000: (10_000, 50_000, 100_000), 4000: (10_000, 50_000)}
RATIO_TARGET = 300.0
CONTENTION_LIMIT = 0.5  # cores used by other processes
OPTIONS = {"max_wait_s": 30.0, "pf_budget_s": 55.0}  # set from the command line


# ---------------------------------------------------------------------------------------------
# Machine and load




def _busy_seconds() -> tuple[float, float]:
    """(busy, steal) CPU seconds of the whole machine since boot, from /proc/stat."""
    fields = [int(v) for v in Path("/proc/stat").read_text().splitlines()[0].split()[1:]]
    tick = os.sysconf("SC_CLK_TCK")
    user, nice, system, _idle, _iowait, irq, softirq, steal = fields[:8]
    return (user + nice + system + irq + softirq) / tick, steal / tick


def _own_cpu_seconds() -> float:
    """CPU seconds of this process and of its finished children (the compile probes)."""
    times = os.times()
    return times.user + times.system + times.children_user + times.children_system


class LoadMonitor:
    """CPU used by other processes (cores) over an interval: machine busy time minus ours."""

    def __init__(self):
        self.start()

    def start(self):
        self._wall = time.perf_counter()
        self._busy, self._steal = _busy_seconds()
        self._own = _own_cpu_seconds()

    def stop(self) -> dict:
        wall = time.perf_counter() - self._wall
        busy, steal = _busy_seconds()
        own = _own_cpu_seconds() - self._own
        others = max(0.0, (busy - self._busy) - own) / wall
        return {"other_cores": round(others, 2), "steal_cores": round((steal - self._steal) / wall, 2),
                "own_cores": round(own / wall, 2), "wall_s": round(wall, 2),
                "loadavg_1min": round(os.getloadavg()[0], 2)}


def wait_for_quiet(max_wait_s: float | None = None, sample_s: float = 1.5) -> dict:
    """Sample other processes' CPU use; wait while it is above the limit (up to max_wait_s)."""
    max_wait_s = OPTIONS["max_wait_s"] if max_wait_s is None else max_wait_s
    waited = 0.0
    while True:
        monitor = LoadMonitor()
        time.sleep(sample_s)
        sample = monitor.stop()
        if sample["other_cores"] <= CONTENTION_LIMIT or waited >= max_wait_s:
            sample["waited_s"] = waited
            return sample
        waited += sample_s


def timed_section(name: str, function, log: dict, may_rerun: bool = True):
    """Run ``function`` after waiting for a quiet machine; re-run once if others loaded it
    (unless ``may_rerun`` is false: the long particle-filter sections only record the load)."""
    attempts = []
    for attempt in range(2 if may_rerun else 1):
        before = wait_for_quiet()
        monitor = LoadMonitor()
        value = function()
        during = monitor.stop()
        attempts.append({"before": before, "during": during})
        print(f"  [{name}] other processes: {during['other_cores']} cores during, "
              f"{before['other_cores']} before; loadavg {during['loadavg_1min']}", flush=True)
        if during["other_cores"] <= CONTENTION_LIMIT or not may_rerun or attempt == 1:
            break
        print(f"  [{name}] contended: re-running", flush=True)
    log[name] = attempts
    return value


# ---------------------------------------------------------------------------------------------
# Timing helpers


def median_time(function, repeats: int, warmup: int = 2) -> dict:
    for _ in range(warmup):
        function()
    seconds = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        seconds.append(time.perf_counter() - start)
    seconds.sort()
    return {"median_ms": 1e3 * statistics.median(seconds), "min_ms": 1e3 * seconds[0],
            "p90_ms": 1e3 * seconds[int(0.9 * (len(seconds) - 1))], "repeats": repeats}


def settings_for(mode: str, n_draws: int):
    from smle.engine import eis

    if mode == "5 iterations":
        return eis.EISSettings(n_draws=n_draws, tol=0.0, max_iter=5)
    return eis.EISSettings(n_draws=n_draws)  # defaults: tol 1e-6, max_iter 50


MODES = ("5 iterations", "default convergence")


def simulated(n_periods: int, seed: int):
    import smle

    y, _ = smle.simulate("sv", DESIGN, n_periods, seed=seed)
    return y


def jax_inputs(y, seed=1):
    import jax
    import jax.numpy as jnp

    params = {k: jnp.asarray(v, float) for k, v in DESIGN.items()}
    return params, jnp.asarray(y), jax.random.PRNGKey(seed)


# ---------------------------------------------------------------------------------------------
# 1. smle kernel


def bench_smle(repeats: int) -> list[dict]:
    import jax

    import smle
    from smle.engine.methods import compiled_eis

    model = smle.get_model("sv")
    rows = []
    for n_periods in SPEED_PERIODS:
        params, y, key = jax_inputs(simulated(n_periods, seed=n_periods))
        for n_draws in SPEED_DRAWS:
            for mode in MODES:
                kernel = compiled_eis(model, settings_for(mode, n_draws))
                out, _ = kernel(params, y, key)
                timing = median_time(lambda: jax.block_until_ready(kernel(params, y, key)),
                                     repeats if n_periods < 8000 else max(20, repeats * 2 // 3))
                rows.append({"T": n_periods, "S": n_draws, "mode": mode, **_round(timing),
                             "iterations": int(out.info.iterations),
                             "converged": bool(out.info.converged), "value": float(out.value)})
                print(f"  smle  T={n_periods:5d} S={n_draws:4d} {mode:20s} {timing['median_ms']:8.2f} ms "
                      f"({rows[-1]['iterations']} it)", flush=True)
    return rows


def bench_public_call(repeats: int) -> dict:
    """``smle.loglik`` itself (input checks, host transfer of paths and weights) at the headline size.

    The public function refuses tol = 0, so tol = 1e-300 stands in (it runs all 5 iterations).
    """
    import smle

    y = simulated(HEADLINE["T"], seed=HEADLINE["T"])
    call = lambda: smle.loglik("sv", DESIGN, y, n_draws=HEADLINE["S"], seed=1, tol=1e-300, max_iter=5)
    result = call()
    timing = median_time(call, repeats)
    return {**_round(timing), "iterations": result.iterations, "T": HEADLINE["T"], "S": HEADLINE["S"]}


def bench_breakdown(repeats: int) -> dict:
    """The pieces of one EIS iteration at the headline size, each JIT-compiled on its own.

    One 5-iteration evaluation is: the Newton start, 5 x (assemble + draw + log g + regression),
    then a final assemble + draw + log g + weights on the scoring draws.
    """
    import jax

    import smle
    from smle.engine import eis

    model = smle.get_model("sv")
    params, y, key = jax_inputs(simulated(HEADLINE["T"], seed=HEADLINE["T"]))
    state = model.latent(params)
    settings = settings_for(MODES[0], HEADLINE["S"])
    fit_normals, _ = eis.standard_normals(key, HEADLINE["T"], settings)

    def log_obs_fn(x):
        return model.log_obs_density(params, y, x)

    guess = model.mode_guess(params, y)
    start = jax.jit(lambda: eis.newton_start(state, log_obs_fn, guess, settings.n_newton))()
    sampler = jax.jit(lambda a: eis.assemble(state, a))(start)
    paths = jax.jit(eis.draw_paths)(sampler, fit_normals)
    pieces = {
        "newton start (5 steps)": (lambda g: eis.newton_start(state, log_obs_fn, g, settings.n_newton), (guess,)),
        "assemble (backward scalar scan)": (lambda a: eis.assemble(state, a), (start,)),
        "draw paths (forward scan over (S,))": (eis.draw_paths, (sampler, fit_normals)),
        "log g at the paths": (log_obs_fn, (paths,)),
        "regression (log g + fit_quadratic)": (lambda x: eis.fit_quadratic(x, log_obs_fn(x)), (paths,)),
        "one EIS iteration (eis_map)": (lambda a: eis.eis_map(state, log_obs_fn, fit_normals, a), (start,)),
    }
    out = {}
    for name, (function, args) in pieces.items():
        compiled = jax.jit(function)
        out[name] = round(median_time(lambda: jax.block_until_ready(compiled(*args)), repeats)["median_ms"], 3)
    out["bytes per (T x S) float64 array"] = HEADLINE["T"] * HEADLINE["S"] * 8
    return out


def _round(timing: dict) -> dict:
    return {k: (round(v, 3) if isinstance(v, float) else v) for k, v in timing.items()}


# ---------------------------------------------------------------------------------------------
# 2. compile time (fresh processes)


def probe(kind: str) -> dict:
    """Run inside a fresh process: compile-time or first-call measurements at the headline size."""
    start = time.perf_counter()
    import jax

    import smle
    from smle.engine.methods import compiled_eis

    import_s = time.perf_counter() - start
    model = smle.get_model("sv")
    params, y, key = jax_inputs(simulated(HEADLINE["T"], seed=HEADLINE["T"]))
    jax.block_until_ready(y)
    out = {"import_s": round(import_s, 3)}
    if kind == "compile":
        for mode in MODES:
            kernel = compiled_eis(model, settings_for(mode, HEADLINE["S"]))
            t0 = time.perf_counter()
            lowered = kernel.lower(params, y, key)
            t1 = time.perf_counter()
            lowered.compile()
            t2 = time.perf_counter()
            out[mode] = {"lower_s": round(t1 - t0, 3), "compile_s": round(t2 - t1, 3)}
    else:
        kernel = compiled_eis(model, settings_for("5 iterations", HEADLINE["S"]))
        t0 = time.perf_counter()
        jax.block_until_ready(kernel(params, y, key))
        t1 = time.perf_counter()
        jax.block_until_ready(kernel(params, y, key))
        t2 = time.perf_counter()
        out.update({"first_call_s": round(t1 - t0, 3), "second_call_ms": round(1e3 * (t2 - t1), 3)})
    return out


def run_probe(kind: str, env: dict) -> dict:
    completed = subprocess.run([sys.executable, __file__, "--probe", kind], env={**os.environ, **env},
                               capture_output=True, text=True, check=True)
    return json.loads(completed.stdout.strip().splitlines()[-1])


def bench_compile() -> dict:
    no_cache = run_probe("compile", {"SMLE_COMPILATION_CACHE": "0"})
    with tempfile.TemporaryDirectory() as folder:
        env = {"SMLE_CACHE_DIR": folder}
        cold = run_probe("first-call", env)
        warm = run_probe("first-call", env)
    return {"T": HEADLINE["T"], "S": HEADLINE["S"], "lower_and_compile_no_cache": no_cache,
            "first_call_empty_cache": cold, "first_call_warm_cache": warm}


# ---------------------------------------------------------------------------------------------
# 3. NumPy baseline


def bench_numpy(smle_rows: list[dict], quick: bool) -> list[dict]:
    import numpy as np

    import numpy_eis
    from smle.engine import eis

    rows = []
    for n_periods in SPEED_PERIODS:
        y = simulated(n_periods, seed=n_periods)
        _, _, key = jax_inputs(y)
        for n_draws in SPEED_DRAWS:
            normals = [np.asarray(a) for a in eis.standard_normals(key, n_periods, settings_for(MODES[0], n_draws))]
            for mode in MODES:
                settings = settings_for(mode, n_draws)
                call = lambda: numpy_eis.eis_loglik(DESIGN, y, *normals, tol=settings.tol,
                                                    max_iter=settings.max_iter, n_newton=settings.n_newton)
                result = call()
                repeats = 3 if (quick or n_periods >= 8000) else 7
                timing = median_time(call, repeats, warmup=0)
                jax_row = next(r for r in smle_rows if (r["T"], r["S"], r["mode"]) == (n_periods, n_draws, mode))
                rows.append({"T": n_periods, "S": n_draws, "mode": mode, **_round(timing),
                             "iterations": result["iterations"],
                             "value_diff_vs_smle": abs(result["value"] - jax_row["value"]),
                             "smle_median_ms": jax_row["median_ms"],
                             "speedup": round(timing["median_ms"] / jax_row["median_ms"], 1)})
                print(f"  numpy T={n_periods:5d} S={n_draws:4d} {mode:20s} {timing['median_ms']:8.1f} ms "
                      f"speed-up {rows[-1]['speedup']:5.1f}x  |diff| {rows[-1]['value_diff_vs_smle']:.1e}",
                      flush=True)
    return rows


# ---------------------------------------------------------------------------------------------
# 4. Efficiency: EIS against the bootstrap particle filter


def _summarise(method, size_label, size, values, seconds, reference) -> dict:
    n = len(values)
    mean = statistics.fmean(values)
    variance = statistics.variance(values)
    bias = mean - reference
    seconds_per_eval = statistics.median(seconds)
    mse = variance + bias * bias
    return {"method": method, size_label: size, "seeds": n, "mean": mean, "variance": variance,
            "sd": math.sqrt(variance), "bias": bias, "bias_se": math.sqrt(variance / n),
            "seconds_per_eval": seconds_per_eval, "mse": mse, "mse_x_seconds": mse * seconds_per_eval,
            "variance_x_seconds": variance * seconds_per_eval}


def bench_efficiency(quick: bool, log: dict) -> dict:
    import jax

    import particle_filter
    import smle
    from smle.engine.methods import compiled_eis
    from smle.reference import grid_loglik

    model = smle.get_model("sv")
    eis_seeds = 10 if quick else 50
    pf_max_seeds, pf_min_seeds = (4, 3) if quick else (30, 6)
    pf_budget_s = 10.0 if quick else OPTIONS["pf_budget_s"]
    out = {}
    for n_periods in EFFICIENCY_PERIODS:
        y = simulated(n_periods, seed=7 * n_periods)
        params, y_jax, _ = jax_inputs(y)
        start = time.perf_counter()
        reference = grid_loglik("sv", DESIGN, y, n_grid=1000)
        grid_s = time.perf_counter() - start
        check = grid_loglik("sv", DESIGN, y, n_grid=2000)
        rows = []

        def eis_rows():
            found = []
            for n_draws in EIS_EFFICIENCY_DRAWS:
                for mode in (MODES[1],) if n_draws != 64 else MODES:
                    kernel = compiled_eis(model, settings_for(mode, n_draws))
                    jax.block_until_ready(kernel(params, y_jax, jax.random.PRNGKey(0)))
                    values, seconds, iterations = [], [], []
                    for seed in range(1, eis_seeds + 1):
                        key = jax.random.PRNGKey(1000 + seed)
                        t0 = time.perf_counter()
                        result, _ = jax.block_until_ready(kernel(params, y_jax, key))
                        seconds.append(time.perf_counter() - t0)
                        values.append(float(result.value))
                        iterations.append(int(result.info.iterations))
                    row = _summarise(f"EIS ({mode})", "S", n_draws, values, seconds, reference)
                    row["iterations_median"] = statistics.median(iterations)
                    found.append(row)
                    print(f"  T={n_periods} EIS S={n_draws:4d} {mode:20s} sd {row['sd']:.4f} bias "
                          f"{row['bias']:+.4f} {1e3 * row['seconds_per_eval']:.2f} ms", flush=True)
            return found

        rows += timed_section(f"efficiency T={n_periods} EIS", eis_rows, log)

        for n_particles in (1_000, 5_000) if quick else PF_PARTICLES[n_periods]:
            def pf_row():
                kernel = particle_filter.particle_filter(n_particles)
                pf_params = {k: params[k] for k in ("mu", "phi", "sigma_eta")}
                t0 = time.perf_counter()
                jax.block_until_ready(kernel(pf_params, y_jax, jax.random.PRNGKey(0)))
                first_s = time.perf_counter() - t0
                t0 = time.perf_counter()
                jax.block_until_ready(kernel(pf_params, y_jax, jax.random.PRNGKey(1)))
                one_s = time.perf_counter() - t0
                n_seeds = int(min(pf_max_seeds, max(pf_min_seeds, pf_budget_s // one_s)))
                values, seconds = [], [one_s]
                for seed in range(2, n_seeds + 1):
                    t0 = time.perf_counter()
                    values.append(float(kernel(pf_params, y_jax, jax.random.PRNGKey(seed))))
                    seconds.append(time.perf_counter() - t0)
                values.insert(0, float(kernel(pf_params, y_jax, jax.random.PRNGKey(1))))
                row = _summarise("bootstrap PF", "N", n_particles, values, seconds, reference)
                row["compile_and_first_call_s"] = first_s
                print(f"  T={n_periods} PF  N={n_particles:7d} ({n_seeds} seeds) sd {row['sd']:.4f} bias "
                      f"{row['bias']:+.4f} {row['seconds_per_eval']:.2f} s", flush=True)
                return row

            rows.append(timed_section(f"efficiency T={n_periods} PF N={n_particles}", pf_row, log,
                                      may_rerun=False))

        eis_best = min((r for r in rows if r["method"].startswith("EIS")), key=lambda r: r["mse_x_seconds"])
        eis_headline = next(r for r in rows if r["method"] == "EIS (default convergence)" and r["S"] == 64)
        for row in rows:
            row["ratio_to_eis_S64"] = row["mse_x_seconds"] / eis_headline["mse_x_seconds"]
        pf_rows = [r for r in rows if r["method"] == "bootstrap PF"]
        pf_best = min(pf_rows, key=lambda r: r["mse_x_seconds"])
        out[str(n_periods)] = {
            "grid_loglik_n1000": reference, "grid_loglik_n2000": check,
            "grid_n1000_minus_n2000": reference - check, "grid_seconds": grid_s,
            "rows": rows,
            "ratio_pf_best_to_eis_S64": pf_best["mse_x_seconds"] / eis_headline["mse_x_seconds"],
            "ratio_pf_best_to_eis_best": pf_best["mse_x_seconds"] / eis_best["mse_x_seconds"],
            "ratio_pf_worst_to_eis_S64": max(r["mse_x_seconds"] for r in pf_rows) / eis_headline["mse_x_seconds"],
        }
    return out


# ---------------------------------------------------------------------------------------------
# Report


def source_state() -> dict:
    """The smle commit measured and any uncommitted changes in smle/ (others edit it concurrently)."""
    def git(*args):
        try:
            return subprocess.run(["git", *args], cwd=HERE.parent, capture_output=True, text=True,
                                  check=True).stdout.strip()
        except (OSError, subprocess.CalledProcessError):
            return "unknown"

    return {"commit": git("rev-parse", "--short", "HEAD"),
            "uncommitted_in_smle": git("status", "--porcelain", "--", "smle").splitlines()}


def machine() -> dict:
    import jax
    import numpy as np

    return {"nproc": os.cpu_count(), "cpu_model": cpu_model(), "python": platform.python_version(),
            "jax": jax.__version__, "jaxlib": getattr(__import__("jaxlib"), "__version__", "?"),
            "numpy": np.__version__, "platform": platform.platform(),
            "date": datetime.datetime.now().astimezone().isoformat(timespec="seconds")}


def fmt(value, digits=3):
    return f"{value:.{digits}g}" if isinstance(value, float) else str(value)


def write_markdown(result: dict, path: Path) -> None:
    m = result["machine"]
    lines = [
        "# bench_loglik: smle's EIS log-likelihood for `sv`, speed and efficiency",
        "",
        f"Machine: {m['nproc']} cores, {m['cpu_model']}; Python {m['python']}, jax {m['jax']}, "
        f"numpy {m['numpy']}; {m['platform']}. Run {m['date']}, {result['total_minutes']:.1f} minutes"
        f"{' (QUICK mode: few repeats and seeds)' if result['quick'] else ''}.",
        "",
        f"smle source measured: commit {result['source']['commit']}"
        + (f", with uncommitted changes in smle/: {', '.join(result['source']['uncommitted_in_smle'])}"
           if result["source"]["uncommitted_in_smle"] else ", clean")
        + ("" if result["source"] == result["source_at_end"] else " (smle CHANGED during the run)") + ".",
        "",
        f"Design: sv with mu = {DESIGN['mu']}, phi = {DESIGN['phi']}, sigma_eta = {DESIGN['sigma_eta']}; "
        "data from `smle.simulate`. Float64 throughout.",
        "",
        "## Load during the run",
        "",
        "The machine is shared. Before each section the script waited for other processes to use under "
        f"{CONTENTION_LIMIT} core, and measured the CPU other processes used during it (machine busy time "
        "from /proc/stat minus this process's CPU time); a contended section was re-run once. The 1-minute "
        "load average includes this benchmark itself (about 1-2 while it computes), so it is a poor "
        "signal of outside load here.",
        "",
        "| section | other processes (cores) during | before | loadavg 1 min | attempts |",
        "|---|---:|---:|---:|---:|",
    ]
    for name, attempts in result["load"].items():
        last = attempts[-1]
        lines.append(f"| {name} | {last['during']['other_cores']} | {last['before']['other_cores']} | "
                     f"{last['during']['loadavg_1min']} | {len(attempts)} |")
    lines.append(f"\n`uptime` load average at the start: {result['loadavg_at_start']}.")
    h = result["headline"]
    lines += [
        "",
        "## Targets",
        "",
        "| target | measured | met |",
        "|---|---|---|",
        f"| T = 2000, S = 64, 5 iterations: under {h['target_ms']} ms | {h['median_ms']:.2f} ms (median) | "
        f"{'yes' if h['met'] else 'NO'} |",
        f"| smle >= {SPEEDUP_TARGET:g}x faster than NumPy (every size, both modes) | "
        f"{result['speedup_min']:.1f}x to {result['speedup_max']:.1f}x | "
        f"{'yes' if result['speedup_min'] >= SPEEDUP_TARGET else 'NO'} |",
    ]
    eff = result["efficiency"]
    r1000 = eff["1000"]["ratio_pf_best_to_eis_S64"]
    lines.append(f"| (var + bias^2) x time, PF / EIS >= {RATIO_TARGET:g} at T = 1000 | best PF row / EIS S = 64: "
                 f"{r1000:.0f} | {'yes' if r1000 >= RATIO_TARGET else 'NO'} |")
    lines += [
        "",
        "## smle kernel (`compiled_eis` called directly, block_until_ready)",
        "",
        "Median of the repeats after two warm-up calls; '5 iterations' is tol = 0, max_iter = 5; "
        "'default' is tol = 1e-6, max_iter = 50.",
        "",
        "| T | S | mode | median ms | min ms | p90 ms | iterations | repeats |",
        "|---:|---:|---|---:|---:|---:|---:|---:|",
    ]
    for r in result["smle_kernel"]:
        lines.append(f"| {r['T']} | {r['S']} | {r['mode']} | {r['median_ms']:.2f} | {r['min_ms']:.2f} | "
                     f"{r['p90_ms']:.2f} | {r['iterations']} | {r['repeats']} |")
    p = result["public_call"]
    lines.append(f"\n`smle.loglik(...)` itself at T = {p['T']}, S = {p['S']}, 5 iterations (input checks, "
                 f"paths and weights copied to NumPy): median {p['median_ms']:.2f} ms.")
    lines += [
        "",
        f"Where the time goes at T = {HEADLINE['T']}, S = {HEADLINE['S']} (each piece compiled on its own, "
        "median ms): a 5-iteration evaluation is the Newton start + 5 EIS iterations + one scoring pass.",
        "",
        "| piece | ms |",
        "|---|---:|",
    ]
    for name, value in result["breakdown"].items():
        if name.startswith("bytes"):
            continue
        lines.append(f"| {name} | {value:.3f} |")
    c = result["compile"]
    nc = c["lower_and_compile_no_cache"]
    lines += [
        "",
        f"## Compile time (fresh processes, T = {c['T']}, S = {c['S']})",
        "",
        "| measurement | seconds |",
        "|---|---:|",
    ]
    for mode in MODES:
        lines.append(f"| SMLE_COMPILATION_CACHE=0, {mode}: trace+lower / compile | "
                     f"{nc[mode]['lower_s']:.2f} / {nc[mode]['compile_s']:.2f} |")
    lines += [
        f"| first call (trace, compile, run), empty persistent cache | {c['first_call_empty_cache']['first_call_s']:.2f} |",
        f"| first call, warm persistent cache | {c['first_call_warm_cache']['first_call_s']:.2f} |",
        f"| import smle (for scale) | {nc['import_s']:.2f} |",
        "",
        "## NumPy baseline (experiments/numpy_eis.py, same algorithm, same normals)",
        "",
        "| T | S | mode | NumPy ms | smle ms | speed-up | iterations | abs diff of log L |",
        "|---:|---:|---|---:|---:|---:|---:|---:|",
    ]
    for r in result["numpy"]:
        lines.append(f"| {r['T']} | {r['S']} | {r['mode']} | {r['median_ms']:.1f} | {r['smle_median_ms']:.2f} | "
                     f"{r['speedup']:.1f}x | {r['iterations']} | {r['value_diff_vs_smle']:.1e} |")
    lines += [
        "",
        "## Efficiency against the bootstrap particle filter",
        "",
        "Each method is run with many seeds on one simulated data set per T. variance = sample variance "
        "of log L_hat across seeds; bias = mean - grid filter (n_grid = 1000), with its standard error "
        "sd/sqrt(seeds) (the measured bias^2 includes about variance/seeds of noise); seconds = median "
        "seconds per evaluation (compiled, block_until_ready). Product = (variance + bias^2) x seconds; "
        "ratio = product / product of EIS with S = 64 and default convergence.",
        "",
    ]
    for n_periods, block in eff.items():
        lines += [
            f"### T = {n_periods}",
            "",
            f"Grid filter: {block['grid_loglik_n1000']:.4f} (n_grid = 1000), "
            f"{block['grid_loglik_n2000']:.4f} (n_grid = 2000); difference "
            f"{block['grid_n1000_minus_n2000']:.1e}; {block['grid_seconds']:.1f} s.",
            "",
            "| method | size | seeds | sd | bias (se) | seconds/eval | (var + bias^2) x s | ratio |",
            "|---|---:|---:|---:|---:|---:|---:|---:|",
        ]
        for r in block["rows"]:
            size = f"S = {r['S']}" if "S" in r else f"N = {r['N']:,}"
            method = r["method"] + (f", {r['iterations_median']:g} it" if "iterations_median" in r else "")
            lines.append(f"| {method} | {size} | {r['seeds']} | {r['sd']:.4f} | {r['bias']:+.4f} ({r['bias_se']:.4f}) | "
                         f"{r['seconds_per_eval']:.4g} | {r['mse_x_seconds']:.3g} | {r['ratio_to_eis_S64']:.0f} |")
        lines += [
            "",
            f"PF / EIS (S = 64): best PF row {block['ratio_pf_best_to_eis_S64']:.0f}, worst PF row "
            f"{block['ratio_pf_worst_to_eis_S64']:.0f}; best PF / best EIS row "
            f"{block['ratio_pf_best_to_eis_best']:.0f}.",
            "",
        ]
    lines += ["## Notes", ""] + [f"* {note}" for note in result["notes"]]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def notes(result: dict) -> list[str]:
    out = []
    h = result["headline"]
    if not h["met"]:
        out.append(f"Headline target missed: {h['median_ms']:.2f} ms against {h['target_ms']} ms.")
    if result["speedup_min"] < SPEEDUP_TARGET:
        out.append(f"Speed-up target missed at some sizes (minimum {result['speedup_min']:.1f}x).")
    for n_periods, block in result["efficiency"].items():
        pf = [r for r in block["rows"] if r["method"] == "bootstrap PF"]
        few = [f"N = {r['N']:,}: {r['seeds']} seeds" for r in pf if r["seeds"] < 30]
        if few:
            out.append(f"T = {n_periods}: fewer than 30 seeds for the slow PF cases to keep the run short "
                       f"({'; '.join(few)}); their variance is known to about +-{100 * math.sqrt(2 / (min(r['seeds'] for r in pf) - 1)):.0f}% "
                       "at the fewest seeds.")
    contended = [name for name, attempts in result["load"].items() if attempts[-1]["during"]["other_cores"] > CONTENTION_LIMIT]
    if contended:
        out.append("Sections still contended after a re-run (timings there are pessimistic): " + ", ".join(contended) + ".")
    return out


def main(argv=None) -> dict:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="few repeats and seeds (checks the script)")
    parser.add_argument("--max-wait", type=float, default=30.0,
                        help="seconds to wait for a quiet machine before each section (default 30)")
    parser.add_argument("--pf-budget", type=float, default=55.0,
                        help="seconds of particle-filter evaluations per case (default 55; 6 to 30 seeds)")
    parser.add_argument("--probe", choices=("compile", "first-call"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.probe:
        print(json.dumps(probe(args.probe)))
        return {}
    OPTIONS.update(max_wait_s=args.max_wait, pf_budget_s=args.pf_budget)
    started = time.perf_counter()
    loadavg_at_start = [round(v, 2) for v in os.getloadavg()]
    source_at_start = source_state()
    import smle  # noqa: F401

    log: dict = {}
    repeats = 5 if args.quick else 30
    print("smle kernel", flush=True)
    smle_rows = timed_section("smle kernel", lambda: bench_smle(repeats), log)
    public = timed_section("smle.loglik public call", lambda: bench_public_call(repeats), log)
    breakdown = timed_section("kernel breakdown", lambda: bench_breakdown(repeats), log)
    print("compile (fresh processes)", flush=True)
    compile_times = timed_section("compile", bench_compile, log)
    print("numpy baseline", flush=True)
    numpy_rows = timed_section("numpy baseline", lambda: bench_numpy(smle_rows, args.quick), log)
    print("efficiency", flush=True)
    efficiency = bench_efficiency(args.quick, log)

    headline_row = next(r for r in smle_rows if (r["T"], r["S"], r["mode"]) == (HEADLINE["T"], HEADLINE["S"], MODES[0]))
    speedups = [r["speedup"] for r in numpy_rows]
    result = {
        "benchmark": "smle EIS log-likelihood for sv: kernel speed, compile time, NumPy baseline, PF efficiency",
        "quick": args.quick, "design": DESIGN, "machine": machine(), "source": source_at_start,
        "source_at_end": source_state(), "loadavg_at_start": loadavg_at_start,
        "headline": {**HEADLINE, "median_ms": headline_row["median_ms"],
                     "met": headline_row["median_ms"] < HEADLINE["target_ms"]},
        "speedup_min": min(speedups), "speedup_max": max(speedups),
        "smle_kernel": smle_rows, "public_call": public, "breakdown": breakdown, "compile": compile_times, "numpy": numpy_rows,
        "efficiency": efficiency, "load": log,
    }
    result["total_minutes"] = (time.perf_counter() - started) / 60
    result["notes"] = notes(result)
    folder = HERE / "results"
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "bench_loglik.json").write_text(json.dumps(result, indent=2) + "\n", encoding="utf-8")
    write_markdown(result, folder / "bench_loglik.md")
    print(f"done in {result['total_minutes']:.1f} min: headline {headline_row['median_ms']:.2f} ms, "
          f"speed-up {min(speedups):.1f}-{max(speedups):.1f}x, PF/EIS at T=1000 "
          f"{efficiency['1000']['ratio_pf_best_to_eis_S64']:.0f}", flush=True)
    return result


if __name__ == "__main__":
    main()
