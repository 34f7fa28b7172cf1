"""Rejection rates of the coverage tests over replications of a backtest of a correct `garch`.

Each replication simulates `garch` (normal innovations) and forecasts N one-step periods from a
rolling window: (a) at the true parameters (the forecast machinery alone: simulated VaR, hits),
(b) re-estimated every 50 forecasts (smle.backtest; estimation error added). Reports how often
Kupiec's (1995) and Christoffersen's (1998) conditional coverage tests reject at 5%, per VaR
level. Under (a) the rates should be near the tests' sizes (about 5%, up to the chi-square
approximation at small hit counts); under (b) estimation error makes the VaR itself random, which
raises them (Escanciano and Olmo 2010, J. Business & Economic Statistics 28; recalled from memory).

Results: experiments/results/backtest_coverage.{json,md}.

    python experiments/backtest_coverage.py [replications]
"""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

import numpy as np

RESULTS = Path(__file__).resolve().parent / "results"
TRUTH = {"mu": 0.03, "ar1": 0.0, "omega": 0.05, "alpha": 0.1, "beta": 0.85}
WINDOW, N_FORECASTS, REFIT_EVERY, N_PATHS, LEVELS = 300, 250, 50, 5000, (0.01, 0.05)


def _rejections(hits) -> dict:
    from smle.decision.coverage import christoffersen_conditional_coverage, kupiec_unconditional_coverage

    out = {}
    for i, p in enumerate(LEVELS):
        out[f"{p:g}"] = dict(hits=int(hits[i].sum()),
                             kupiec=kupiec_unconditional_coverage(hits[i], p).p_value < 0.05,
                             conditional=christoffersen_conditional_coverage(hits[i], p).p_value < 0.05)
    return out


def kupiec_exact_size(p: float, n: int) -> float:
    """The exact rejection rate at 5% of Kupiec's test over n i.i.d. Bernoulli(p) hits (binomial sum)."""
    from scipy import stats

    from smle.decision.coverage import kupiec_unconditional_coverage

    rejecting = [k for k in range(n + 1)
                 if kupiec_unconditional_coverage(np.arange(n) < k, p).p_value < 0.05]
    return float(sum(stats.binom.pmf(k, n, p) for k in rejecting))


def replicate(r: int) -> dict:
    import smle
    from smle.decision.backtest import backtest, one_step, step_seed
    from smle.validation import jax_params

    y, _ = smle.simulate("garch", TRUTH, WINDOW + N_FORECASTS, seed=1000 + r)
    y = np.asarray(y)
    model, params = smle.get_model("garch"), jax_params(TRUTH)
    var = np.empty((len(LEVELS), N_FORECASTS))
    for step, t in enumerate(range(WINDOW, WINDOW + N_FORECASTS)):
        part, _ = one_step(model, params, y[t - WINDOW:t + 1], LEVELS, N_PATHS, step_seed(r, step))
        var[:, step] = part["var"][:, 0]
    known = _rejections((y[WINDOW:][None, :] < -var).astype(int))
    estimated = backtest(model, y, WINDOW, REFIT_EVERY, levels=LEVELS, n_paths=N_PATHS, seed=r,
                         fixed={"ar1": 0.0}, progress=False)
    return dict(known=known, estimated=_rejections(estimated.hits))


def main(n_replications: int) -> None:
    started = time.perf_counter()
    rows = [replicate(r) for r in range(n_replications)]
    lines = [f"# Coverage tests over {n_replications} backtests of a correct `garch`", "",
             f"Window {WINDOW}, {N_FORECASTS} one-step forecasts, {N_PATHS} paths each; truth {TRUTH}; "
             f"{time.perf_counter() - started:.0f} s (load average {os.getloadavg()[0]:.1f}).", "",
             "| parameters | VaR level | mean hits (expected) | Kupiec rejects at 5% (exact size) | "
             "conditional coverage rejects at 5% |",
             "|---|---|---|---|---|"]
    summary = {}
    for case in ("known", "estimated"):
        for p in LEVELS:
            key = f"{p:g}"
            hits = np.mean([row[case][key]["hits"] for row in rows])
            kupiec = np.mean([row[case][key]["kupiec"] for row in rows])
            conditional = np.mean([row[case][key]["conditional"] for row in rows])
            se = np.sqrt(0.05 * 0.95 / n_replications)
            summary[f"{case} {key}"] = dict(hits=hits, kupiec=kupiec, conditional=conditional)
            exact = kupiec_exact_size(p, N_FORECASTS)
            summary[f"{case} {key}"]["kupiec_exact_size"] = exact
            lines.append(f"| {case} | {key} | {hits:.2f} ({p * N_FORECASTS:.1f}) | {kupiec:.3f} +- {se:.3f} "
                         f"({exact:.3f}) | {conditional:.3f} |")
    lines += ["", "+-: the binomial standard error of a 5% rate over these replications. Exact size: the rejection "
              f"rate of Kupiec's test under i.i.d. Bernoulli(p) hits, n = {N_FORECASTS} (a binomial sum): with few "
              "expected hits the chi-square approximation is coarse, and the known-parameter rates are to be read "
              "against it."]
    RESULTS.mkdir(exist_ok=True)
    (RESULTS / "backtest_coverage.json").write_text(json.dumps(dict(summary=summary, n=n_replications), indent=1))
    (RESULTS / "backtest_coverage.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 100)
