"""How much do the control variates reduce the variance of the EIS log-likelihood?

For each design, the same simulated data set (T = 2000) is evaluated at the true parameters with
R independent seeds, and the spread of log L_hat across seeds is compared with and without each
control variate:

* raw: plain EIS;
* independent (the default): minus beta times the error of EIS at the independent-factor
  parameters with the same random numbers (its exact likelihood: the GARCH-NIG closed form for
  ``garch-mix``, adaptive Gauss-Hermite for ``sv``), beta the slope of the run's log weights on
  the independent case's log weights;
* independent (beta = 1): the error subtracted as it is;
* independent (beta across seeds): the coefficient that minimises the variance across these
  seeds (an in-sample optimum, so slightly flattering; shown to say how far beta = 1 is from it);
* draws: pooled Hermite statistics of the scoring normals, coefficients by regression on the run's
  draws;
* both.

The variance reduction factor is Var(raw) / Var(corrected) across seeds, with a 90% bootstrap
interval over seeds. Designs: ``garch-mix`` (ig link) at rho in {0.1, 0.3, 0.5, 0.7, 0.9} and
``sv`` at phi in {0.9, 0.98} (Jacquier, Polson and Rossi 1994 designs, Var(h)/E(h)^2 = 1).

    python experiments/control_variates.py            # R = 100 (writes experiments/results/)
    python experiments/control_variates.py --quick    # R = 20, not written
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np

import smle
from machine import cpu_model

GARCH = dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.06, beta=0.90, gamma=-0.4, **{"lambda": 1.5})
SV = {0.9: dict(mu=-7.36, phi=0.90, sigma_eta=0.363), 0.98: dict(mu=-7.36, phi=0.98, sigma_eta=0.166)}
DESIGNS = [("garch-mix", "rho", rho, {**GARCH, "rho": rho}) for rho in (0.1, 0.3, 0.5, 0.7, 0.9)] + [
    ("sv", "phi", phi, params) for phi, params in SV.items()
]
T, S = 2000, 64
RESULTS = Path(__file__).parent / "results"


def bootstrap_ratio(raw, corrected, rng, n_boot=2000, level=0.90):
    """Var(raw) / Var(corrected) and a percentile bootstrap interval over seeds (paired)."""
    n = raw.shape[0]
    index = rng.integers(0, n, size=(n_boot, n))
    ratios = np.var(raw[index], axis=1, ddof=1) / np.var(corrected[index], axis=1, ddof=1)
    tail = (1 - level) / 2
    return float(np.var(raw, ddof=1) / np.var(corrected, ddof=1)), np.quantile(ratios, [tail, 1 - tail]).tolist()


def run_design(model, params, n_seeds):
    y, _ = smle.simulate(model, params, T, seed=2026)
    rows = {"raw": [], "independent": [], "independent_one": [], "beta_run": [], "independent_error": [], "draws": [], "both": [],
            "nse_raw": [], "nse_independent": [], "nse_draws": []}
    for seed in range(n_seeds):
        a = smle.loglik(model, params, y, n_draws=S, seed=seed, control_variates="independent", cv_coefficient=1.0)
        d = smle.loglik(model, params, y, n_draws=S, seed=seed, control_variates="independent")
        b = smle.loglik(model, params, y, n_draws=S, seed=seed, control_variates="draws")
        c = smle.loglik(model, params, y, n_draws=S, seed=seed, control_variates="both")
        rows["raw"].append(a.value_uncorrected)
        rows["independent_one"].append(a.value)
        rows["independent"].append(d.value)
        rows["beta_run"].append(d.cv_coefficients["independent"])
        rows["independent_error"].append(a.independent_error)
        rows["draws"].append(b.value)
        rows["both"].append(c.value)
        rows["nse_raw"].append(a.nse_uncorrected)
        rows["nse_independent"].append(d.nse)
        rows["nse_draws"].append(b.nse)
    return {k: np.asarray(v) for k, v in rows.items()}


def summarise(rows, rng):
    raw = rows["raw"]
    error = rows["independent_error"]
    beta = float(np.cov(raw, error)[0, 1] / np.var(error, ddof=1))
    variants = {
        "independent (beta by regression)": rows["independent"],
        "independent (beta = 1)": rows["independent_one"],
        "independent (beta across seeds)": raw - beta * error,
        "draws": rows["draws"],
        "both": rows["both"],
    }
    out = {"sd_raw": float(np.std(raw, ddof=1)), "mean_nse_raw": float(np.mean(rows["nse_raw"])),
           "corr_raw_independent_error": float(np.corrcoef(raw, error)[0, 1]), "beta_across_seeds": beta,
           "sd_independent_error": float(np.std(error, ddof=1)), "variants": {},
           "beta_run_mean": float(np.mean(rows["beta_run"])), "beta_run_sd": float(np.std(rows["beta_run"], ddof=1))}
    for name, values in variants.items():
        factor, interval = bootstrap_ratio(raw, values, rng)
        out["variants"][name] = {"sd": float(np.std(values, ddof=1)), "mean_minus_raw_mean": float(np.mean(values - raw)),
                                 "variance_reduction": factor, "interval_90": interval}
    out["variants"]["independent (beta by regression)"]["mean_single_run_nse"] = float(np.mean(rows["nse_independent"]))
    out["variants"]["draws"]["mean_single_run_nse"] = float(np.mean(rows["nse_draws"]))
    return out


def markdown(results, n_seeds, elapsed):
    lines = [
        "# Control variates: variance reduction of the EIS log-likelihood",
        "",
        f"Measured by `experiments/control_variates.py` on {cpu_model()} (2 cores), {n_seeds} seeds per design, "
        f"T = {T}, S = {S} antithetic draws, true parameters, one simulated data set per design; "
        f"{elapsed / 60:.1f} min in all.",
        "Variance reduction = Var(raw) / Var(corrected) across seeds, 90% bootstrap interval over seeds in brackets.",
        "'beta across seeds' is the in-sample optimal coefficient of the independent control (flattering).",
        "",
        "| model | design | sd raw | corr(raw, indep. error) | beta across seeds | beta by regression (mean, sd) "
        "| independent (default) | independent, beta = 1 | independent, beta across seeds | draws | both |",
        "|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for key, r in results.items():
        v = r["variants"]

        def cell(name):
            x = v[name]
            return f"{x['variance_reduction']:.2f} [{x['interval_90'][0]:.2f}, {x['interval_90'][1]:.2f}]"

        model, design = key.split(" ", 1)
        lines.append(
            f"| {model} | {design} | {r['sd_raw']:.3f} | {r['corr_raw_independent_error']:.3f} | "
            f"{r['beta_across_seeds']:.2f} | {r['beta_run_mean']:.2f} ({r['beta_run_sd']:.2f}) | "
            f"{cell('independent (beta by regression)')} | {cell('independent (beta = 1)')} | "
            f"{cell('independent (beta across seeds)')} | {cell('draws')} | {cell('both')} |"
        )
    return "\n".join(lines) + "\n"


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="20 seeds, results not written")
    args = parser.parse_args()
    n_seeds = 20 if args.quick else 100
    rng = np.random.default_rng(7)
    started = time.perf_counter()
    results = {}
    for model, name, value, params in DESIGNS:
        t0 = time.perf_counter()
        rows = run_design(model, params, n_seeds)
        key = f"{model} {name}={value}"
        results[key] = summarise(rows, rng)
        r = results[key]
        print(f"{key:22s} sd raw {r['sd_raw']:.3f}  corr {r['corr_raw_independent_error']:.3f}  "
              + "  ".join(f"{n}: {x['variance_reduction']:.2f}" for n, x in r["variants"].items())
              + f"   ({time.perf_counter() - t0:.0f} s)", flush=True)
    elapsed = time.perf_counter() - started
    text = markdown(results, n_seeds, elapsed)
    print(text)
    if not args.quick:
        RESULTS.mkdir(exist_ok=True)
        (RESULTS / "control_variates.md").write_text(text)
        (RESULTS / "control_variates.json").write_text(json.dumps(
            {"T": T, "S": S, "n_seeds": n_seeds, "machine": cpu_model(), "results": results}, indent=2))


if __name__ == "__main__":
    main()
