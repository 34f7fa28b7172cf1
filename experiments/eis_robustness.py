"""Does EIS ever return a wrong log-likelihood whose diagnostics look normal?

For each model (sv, sv-t, realized-sv, garch-mix with the ig link) this draws N admissible
parameter points at random (extremes included: phi or rho at +-0.99 and 0.999, sigma_eta from
0.003 to 3.5 on a log scale, nu down to 2.1), simulates T = 500 observations from the model at
each point, and compares ``smle.loglik`` (default settings, 64 draws) with the grid filter
(:func:`smle.reference.grid_loglik` over +-10 stationary sd with 1000 points, checked against 500;
where the two differ by more than 0.01 the grid is doubled, up to 4000 points, until they agree;
the first 200 sv draws and part of sv-t were computed with 1600 points checked against 800).

Each evaluation ends in one of:

* ``ok``: within max(5 NSE, 0.5) of the grid value;
* ``off``: returned, but further from the grid value than that: a silent wrong value;
* ``error``: a clear error was raised (its message is recorded);
and, for returned values, whether the result said it converged and which repairs it used.

    python experiments/eis_robustness.py --label after            # N = 200 per model
    python experiments/eis_robustness.py --label before --n 200   # run against another checkout
    python experiments/eis_robustness.py --quick                  # N = 10, not written

The grid values are cached in experiments/results/eis_robustness_grid.json (a function of the
draw index only), so a second label reuses them. Results: experiments/results/eis_robustness.json
and .md (one section per label).
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np

import smle
from smle.reference import grid_loglik

T = 500
RESULTS = Path(__file__).parent / "results"
MODELS = ("sv", "sv-t", "realized-sv", "garch-mix")


def _persistence(rng):
    if rng.random() < 0.2:
        return float(rng.choice([-0.999, -0.99, 0.99, 0.999]))
    return float(rng.uniform(-0.99, 0.999))


def draw_params(model: str, rng) -> dict:
    """One admissible parameter point (the design of this study; extremes included)."""
    if model == "garch-mix":
        alpha = float(rng.uniform(0.01, 0.25))
        beta = float(rng.uniform(0.3, 0.995 - alpha))
        out = dict(mu=float(rng.uniform(-0.1, 0.1)), ar1=float(rng.uniform(-0.3, 0.3)),
                   omega=float(np.exp(rng.uniform(np.log(0.005), np.log(0.3)))), alpha=alpha, beta=beta,
                   gamma=float(rng.uniform(-1.0, 1.0)), rho=_persistence(rng))
        out["lambda"] = float(np.exp(rng.uniform(np.log(0.05), np.log(100.0))))
        return out
    out = dict(mu=float(rng.uniform(-8.0, 8.0)), phi=_persistence(rng),
               sigma_eta=float(np.exp(rng.uniform(np.log(0.003), np.log(3.5)))))
    if model == "sv-t":
        out["nu"] = 2.1 if rng.random() < 0.15 else float(np.exp(rng.uniform(np.log(2.1), np.log(60.0))))
    if model == "realized-sv":
        out["xi"] = float(rng.uniform(-1.0, 1.0))
        out["sigma_u"] = float(np.exp(rng.uniform(np.log(0.02), np.log(2.0))))
    return out


def case(model: str, index: int):
    rng = np.random.default_rng([17, MODELS.index(model), index])
    params = draw_params(model, rng)
    y, _ = smle.simulate(model, params, T, seed=1000 + index)
    return params, y


def exact_value(model, params, y):
    """Grid value with 1000 points, checked against 500; where they differ by more than 0.01 the
    grid is doubled (up to 4000 points) until two successive values agree."""
    n_grid, previous = 1000, grid_loglik(model, params, y, n_grid=500, width=10.0)
    value = grid_loglik(model, params, y, n_grid=n_grid, width=10.0)
    while abs(value - previous) > 0.01 and n_grid < 4000:
        n_grid *= 2
        previous, value = value, grid_loglik(model, params, y, n_grid=n_grid, width=10.0)
    return value, abs(value - previous)


def evaluate(model, params, y, seed, scoring="auto"):
    start = time.perf_counter()
    try:
        result = smle.loglik(model, params, y, seed=seed, method="eis", scoring=scoring)
    except Exception as error:  # noqa: BLE001 -- what was raised is the measurement
        return {"status": "error", "error": f"{type(error).__name__}: {error}"[:300],
                "seconds": time.perf_counter() - start}
    out = {"value": result.value, "nse": result.nse, "ess": result.ess, "converged": result.converged,
           "iterations": result.iterations, "seconds": time.perf_counter() - start}
    for name in ("repairs", "nse_method"):
        if hasattr(result, name):
            out[name] = getattr(result, name)
    return out


def run(label: str, n_per_model: int, write: bool, scoring: str = "auto"):
    grid_file = RESULTS / "eis_robustness_grid.json"
    grid_cache = json.loads(grid_file.read_text()) if grid_file.exists() else {}
    rows = []
    for model in MODELS:
        for index in range(n_per_model):
            params, y = case(model, index)
            key = f"{model}/{index}"
            if key not in grid_cache:
                value, check = exact_value(model, params, y)
                grid_cache[key] = {"exact": value, "grid_check": check}
            row = {"model": model, "index": index, "params": params, **grid_cache[key],
                   **evaluate(model, params, y, seed=index, scoring=scoring)}
            if "value" in row:
                tolerance = max(5.0 * row["nse"], 0.5)
                row["status"] = "ok" if abs(row["value"] - row["exact"]) <= tolerance else "off"
            rows.append(row)
            print(key, row["status"], row.get("value"), row["exact"], row.get("nse"), row.get("error", ""), flush=True)
        if write:
            grid_file.write_text(json.dumps(grid_cache))
    summary = summarise(rows)
    if write:
        store = RESULTS / "eis_robustness.json"
        everything = json.loads(store.read_text()) if store.exists() else {}
        everything[label] = {"summary": summary, "rows": rows, "T": T, "n_per_model": n_per_model,
                             "smle": smle.__file__}
        store.write_text(json.dumps(everything, indent=1))
        write_markdown(everything)
    print(json.dumps(summary, indent=1))


def summarise(rows):
    out = {}
    for model in MODELS:
        mine = [r for r in rows if r["model"] == model]
        returned = [r for r in mine if r["status"] != "error"]
        out[model] = {
            "draws": len(mine),
            "off": sum(r["status"] == "off" for r in mine),
            "error": sum(r["status"] == "error" for r in mine),
            "not_converged": sum(not r["converged"] for r in returned),
            "repaired": sum(bool(r.get("repairs")) for r in returned),
            "max_abs_error_ok": max((abs(r["value"] - r["exact"]) for r in returned if r["status"] == "ok"), default=0.0),
            "median_seconds": float(np.median([r["seconds"] for r in mine])) if mine else 0.0,
            "grid_check_max": max(r["grid_check"] for r in mine) if mine else 0.0,
        }
    return out


def write_markdown(everything):
    lines = [
        "# EIS robustness over random admissible parameters",
        "",
        f"`experiments/eis_robustness.py`: T = {T}, default settings of `smle.loglik`, data simulated from the "
        "model at each draw; exact value from the grid filter (1000-4000 points, checked by halving; the largest check difference is in the last column). "
        "`off` = returned but further than max(5 NSE, 0.5) from the exact value (a silent wrong value); "
        "`error` = a clear error raised; `repaired` = the result reports a repair (fallback or damping).",
        "",
    ]
    for label, block in everything.items():
        lines += [f"## {label}", "", "| model | draws | off | error | not converged | repaired | "
                  "max abs error (ok) | median s/call | max grid check |", "|---|---|---|---|---|---|---|---|---|"]
        for model, s in block["summary"].items():
            lines.append(f"| {model} | {s['draws']} | {s['off']} | {s['error']} | {s['not_converged']} | "
                         f"{s['repaired']} | {s['max_abs_error_ok']:.3f} | {s['median_seconds']:.3f} | "
                         f"{s['grid_check_max']:.2g} |")
        bad = [r for r in block["rows"] if r["status"] != "ok"]
        if bad:
            lines += ["", "Draws not ok:", ""]
            for r in bad[:60]:
                params = ", ".join(f"{k} {v:.4g}" for k, v in r["params"].items())
                what = r.get("error") or f"value {r['value']:.6g} vs exact {r['exact']:.6g}, nse {r['nse']:.3g}, " \
                                         f"converged {r['converged']}"
                lines.append(f"* {r['model']} #{r['index']} ({params}): {what}")
        lines.append("")
    (RESULTS / "eis_robustness.md").write_text("\n".join(lines) + NOTES)


NOTES = """
## Notes (written by hand after the runs above; kept by the script)

* `before` is the code at the branch point (c12210f); `after` is this branch. Same draws, same grid values.
* Errors after: all are `EISBreakdownError` with the measured reason (collapsed weights: log-weight sd 2.4-12,
  ESS 1-5 of 64, after a repair with 256 draws); the region is sv / sv-t with sigma_eta above about 1.3 and
  |phi| not near 1, and one realized-sv draw with sigma_eta 1.7, sigma_u 2.0. Before, the same region gave
  values 2-150 units off with NSE about 1 and ESS about 1, or FloatingPointError.
* Off after: sv-t #24 and #79 (nu = 2.1, sigma_eta 2.5-2.9: 5.0 and 7.8 NSE low, negative bias of log mean w
  with heavy-tailed weights), garch-mix #104 (lambda 0.18: 6.0 NSE low). realized-sv #154 is not an EIS
  failure: its grid value did not converge (check 9.6e3: sigma_u 0.026 against a stationary sd of 67 is
  beyond any grid of 4000 points), so that row compares with a wrong exact value.
* Not converged after: 3 of 200 garch-mix draws (1.5%; lambda 0.10-0.15, the most heavy-tailed mixing laws),
  0 for the others (damping turns the oscillating iterations of large sigma_eta into convergence).
* `particle scoring (loglik default since particle EIS)`: the same draws with `smle.loglik(method="eis")` at
  today's defaults, whose `scoring="auto"` scores a one-dimensional state by particles (32 fitting draws, 512
  particles) and falls back to path scoring where a particle run breaks down. No silent wrong value in any
  model (realized-sv #154 is the wrong grid reference above: the exact method itself refuses this draw, its
  grid reaching 3.3e3 with 4096 points), sv raised no error where path scoring with 64 draws raised 19, and
  sv-t raised 2 (nu 2.1 with phi -0.999, and sigma_eta 2.8 with phi 0.999: both scorings broke down and the
  error says so). No run failed to converge (tolerance 1e-2).

"""


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--label", default="after")
    parser.add_argument("--n", type=int, default=200)
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--scoring", default="auto", choices=("auto", "paths", "particles"),
                        help="smle.loglik's scoring (method='eis'; runs before particle scoring used the paths)")
    args = parser.parse_args()
    run(args.label, 10 if args.quick else args.n, write=not args.quick, scoring=args.scoring)
