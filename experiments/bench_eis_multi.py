"""Benchmark: EIS with a k-dimensional VAR(1) state (smle.engine.eis_multi), speed against k and T.

What it measures (float64, S = 64 draws, antithetic, default convergence rule tol = 1e-6,
max_iter = 50; median of repeated calls of the JIT-compiled function after a warm-up, with
``block_until_ready``; compile time is the first call minus a timed call):

1. Time against the state dimension k = 1..11 at T = 2000, for two observation densities:
   * ``independent-sv``: k independent SV series, y_it = exp(x_it / 2) eps_it, each x_i an
     AR(1) (phi 0.95, stationary sd 0.5); regression basis: the squares (``diagonal_pairs``).
   * ``factor-sv`` (k >= 2): N = k - 1 series with log variance a_i + b_i f_t + g_it, one
     persistent factor f (phi 0.98, sd 1) and idiosyncratic g_i (phi 0.9, sd 0.3); basis:
     squares and factor-by-idiosyncratic products (``star_pairs``).
     Target: k = 11 (N = 10) under 1 s per evaluation after compilation.
2. Time against T in {500, 1000, 2000, 4000} for the 2-factor SV and for factor-SV with k = 11.
3. The 2-factor SV, y_t = exp((mu + x1_t + x2_t)/2) eps_t (phi 0.98 and 0.5; full basis), at
   T = 2000 against the one-dimensional ``sv`` kernel (``smle.engine.methods.compiled_eis``) on the
   same length. Target: within 3x.

Run: python experiments/bench_eis_multi.py [--quick]
Results: experiments/results/bench_eis_multi.json and experiments/results/bench_eis_multi.md
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

import jax  # noqa: E402
import jax.numpy as jnp  # noqa: E402
import numpy as np  # noqa: E402

import smle  # noqa: E402,F401  (float64)
from machine import cpu_model  # noqa: E402
from smle.engine import eis_multi, latent_var  # noqa: E402
from smle.engine.eis import EISSettings, weight_diagnostics  # noqa: E402

LOG_2PI = float(np.log(2 * np.pi))
N_DRAWS = 64
SETTINGS = EISSettings(n_draws=N_DRAWS)


def median_time(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


# ---------------------------------------------------------------------------------------------
# Observation densities (pure functions of (obs_args, paths (T, S, k)))


def independent_sv_log_obs(obs_args, paths):
    (y,) = obs_args
    return jnp.sum(-0.5 * (LOG_2PI + paths + y[:, None, :] ** 2 * jnp.exp(-paths)), axis=-1)


def factor_sv_log_obs(obs_args, paths):
    level, loading, y = obs_args
    log_var = level + paths[..., :1] * loading + paths[..., 1:]
    return jnp.sum(-0.5 * (LOG_2PI + log_var + y[:, None, :] ** 2 * jnp.exp(-log_var)), axis=-1)


def two_factor_sv_log_obs(obs_args, paths):
    mu, y = obs_args
    log_var = mu + jnp.sum(paths, axis=-1)
    return -0.5 * (LOG_2PI + log_var + y[:, None] ** 2 * jnp.exp(-log_var))


def independent_sv_case(k, n_periods, seed):
    sd = 0.5
    state = latent_var.independent_ar1(jnp.zeros(k), jnp.full(k, 0.95), jnp.full(k, sd * np.sqrt(1 - 0.95**2)))
    path = latent_var.sample_path(state, jax.random.PRNGKey(seed), n_periods)
    y = jnp.exp(0.5 * path) * jax.random.normal(jax.random.PRNGKey(seed + 1), path.shape)
    return state, independent_sv_log_obs, (y,), eis_multi.diagonal_pairs(k)


def factor_sv_case(k, n_periods, seed):
    n_series = k - 1
    phi = jnp.concatenate([jnp.array([0.98]), jnp.full(n_series, 0.9)])
    sd = jnp.concatenate([jnp.array([1.0]), jnp.full(n_series, 0.3)])
    state = latent_var.independent_ar1(jnp.zeros(k), phi, sd * jnp.sqrt(1 - phi**2))
    path = latent_var.sample_path(state, jax.random.PRNGKey(seed), n_periods)
    level = jnp.linspace(-0.5, 0.5, n_series)
    loading = jnp.full(n_series, 0.5)
    log_var = level + path[:, :1] * loading + path[:, 1:]
    y = jnp.exp(0.5 * log_var) * jax.random.normal(jax.random.PRNGKey(seed + 1), log_var.shape)
    return state, factor_sv_log_obs, (level, loading, y), eis_multi.star_pairs(k)


def two_factor_case(n_periods, seed):
    phi = jnp.array([0.98, 0.5])
    sd = jnp.array([0.6, 0.4])
    state = latent_var.independent_ar1(jnp.zeros(2), phi, sd * jnp.sqrt(1 - phi**2))
    path = latent_var.sample_path(state, jax.random.PRNGKey(seed), n_periods)
    mu = jnp.asarray(0.2)
    y = jnp.exp(0.5 * (mu + path.sum(axis=1))) * jax.random.normal(jax.random.PRNGKey(seed + 1), (n_periods,))
    return state, two_factor_sv_log_obs, (mu, y), eis_multi.full_pairs(2)


def run_case(name, state, log_obs, obs_args, pairs, n_periods, repeats):
    k = state.intercept.shape[0]

    @jax.jit
    def evaluate(state, obs_args, key):
        out = eis_multi.eis_loglik_multi(
            state, log_obs, obs_args, jnp.zeros((n_periods, k)), key, SETTINGS, pairs
        )
        return out.value, out.log_weights, out.info

    key = jax.random.PRNGKey(0)
    start = time.perf_counter()
    value, weights, info = jax.block_until_ready(evaluate(state, obs_args, key))
    first = time.perf_counter() - start
    seconds = median_time(lambda: jax.block_until_ready(evaluate(state, obs_args, key)), repeats)
    nse = float(weight_diagnostics(weights, True)["nse"])
    row = {
        "case": name, "k": k, "T": n_periods, "S": N_DRAWS, "pairs": len(pairs),
        "ms": round(seconds * 1e3, 2), "compile_s": round(first - seconds, 2),
        "iterations": int(info.iterations), "converged": bool(info.converged),
        "value": round(float(value), 4), "nse": round(nse, 4),
        "min_r_squared": round(float(jnp.min(info.r_squared)), 4),
    }
    print(f"  {name:15s} k={k:2d} T={n_periods:5d} {row['ms']:9.2f} ms  compile {row['compile_s']:5.1f} s  "
          f"{row['iterations']:2d} it  nse {row['nse']:.3f}", flush=True)
    return row


def one_dimensional_sv(n_periods, repeats):
    """The production 1-d kernel for `sv` at the same T and S, for the ratio."""
    from smle.engine.methods import compiled_eis

    model = smle.get_model("sv")
    params = {"mu": jnp.asarray(0.2), "phi": jnp.asarray(0.98), "sigma_eta": jnp.asarray(0.6 * np.sqrt(1 - 0.98**2))}
    y, _ = model.simulate(params, n_periods, jax.random.PRNGKey(3))
    kernel = compiled_eis(model, EISSettings(n_draws=N_DRAWS))
    key = jax.random.PRNGKey(0)
    out = jax.block_until_ready(kernel(params, y, key))
    seconds = median_time(lambda: jax.block_until_ready(kernel(params, y, key)), repeats)
    return {"case": "sv (1-d engine)", "k": 1, "T": n_periods, "S": N_DRAWS, "ms": round(seconds * 1e3, 2),
            "iterations": int(out[0].info.iterations)}


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats and sizes, for checking the script")
    args = parser.parse_args()
    repeats = 3 if args.quick else 7
    dims = (1, 2, 11) if args.quick else tuple(range(1, 12))
    lengths = (500, 2000) if args.quick else (500, 1000, 2000, 4000)

    print("1. time against k at T = 2000")
    against_k = []
    for k in dims:
        against_k.append(run_case("independent-sv", *independent_sv_case(k, 2000, k), 2000, repeats))
        if k >= 2:
            against_k.append(run_case("factor-sv", *factor_sv_case(k, 2000, k), 2000, repeats))

    print("2. time against T")
    against_t = []
    for n_periods in lengths:
        against_t.append(run_case("2-factor-sv", *two_factor_case(n_periods, 1), n_periods, repeats))
        against_t.append(run_case("factor-sv", *factor_sv_case(11, n_periods, 11), n_periods, repeats))

    print("3. 2-factor SV against the 1-d sv kernel, T = 2000")
    two = next(r for r in against_t if r["case"] == "2-factor-sv" and r["T"] == 2000)
    one = one_dimensional_sv(2000, repeats)
    ratio = two["ms"] / one["ms"]
    factor11 = next(r for r in against_k if r["case"] == "factor-sv" and r["k"] == 11)
    targets = {
        "two_factor_over_sv": {"measured": round(ratio, 2), "target": "<= 3", "met": ratio <= 3.0},
        "factor_sv_k11_T2000_ms": {"measured": factor11["ms"], "target": "< 1000", "met": factor11["ms"] < 1000},
    }
    print(f"  2-factor / 1-d sv = {ratio:.2f}; factor-sv k=11: {factor11['ms']:.0f} ms")

    results = {
        "date": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
        "machine": {"cpu": cpu_model(), "python": platform.python_version(), "jax": jax.__version__,
                    "load_average_at_end": [round(v, 2) for v in os.getloadavg()]},
        "settings": {"n_draws": N_DRAWS, "antithetic": True, "tol": SETTINGS.tol, "max_iter": SETTINGS.max_iter,
                     "repeats": repeats, "quick": args.quick},
        "against_k": against_k, "against_T": against_t, "one_dimensional_sv": one, "targets": targets,
    }
    out_dir = HERE / "results"
    out_dir.mkdir(exist_ok=True)
    (out_dir / "bench_eis_multi.json").write_text(json.dumps(results, indent=2) + "\n")
    lines = [
        "# EIS with a k-dimensional VAR(1) state: speed",
        "",
        f"{results['date']}, {results['machine']['cpu']}, JAX {jax.__version__}; S = {N_DRAWS} antithetic, "
        f"tol = {SETTINGS.tol}, median of {repeats} calls after compilation; 1/5/15-minute load average at "
        f"the end {results['machine']['load_average_at_end']} on a shared machine. Produced by "
        "`experiments/bench_eis_multi.py`.",
        "",
        "## Against the state dimension (T = 2000)",
        "",
        "| case | k | basis products | ms | compile s | iterations | NSE | min R^2 |",
        "|---|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for r in against_k:
        lines.append(f"| {r['case']} | {r['k']} | {r['pairs']} | {r['ms']} | {r['compile_s']} | {r['iterations']} | "
                     f"{r['nse']} | {r['min_r_squared']} |")
    lines += ["", "## Against T", "", "| case | k | T | ms | iterations | NSE |", "|---|---:|---:|---:|---:|---:|"]
    for r in against_t:
        lines.append(f"| {r['case']} | {r['k']} | {r['T']} | {r['ms']} | {r['iterations']} | {r['nse']} |")
    lines += [
        "",
        "## Targets",
        "",
        f"* 2-factor SV / 1-d `sv` kernel at T = 2000, S = 64: {two['ms']} ms / {one['ms']} ms = "
        f"{ratio:.2f} (target <= 3: {'met' if ratio <= 3 else 'not met'}).",
        f"* factor-SV, N = 10 (k = 11), T = 2000: {factor11['ms']} ms "
        f"(target < 1000 ms: {'met' if factor11['ms'] < 1000 else 'not met'}).",
        "",
    ]
    (out_dir / "bench_eis_multi.md").write_text("\n".join(lines))


if __name__ == "__main__":
    main()
