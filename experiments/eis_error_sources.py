"""Where does the EIS error come from: the fitted sampler (fitting draws) or the scoring draws?

For one simulated data set per design and T, ``n_samplers`` samplers are fitted from independent
fitting draws; each is scored on R independent scoring sets ("fixed sampler" rows: the spread is
the scoring error given that sampler). Then R runs draw both sets afresh ("both varied": the
error ``smle.loglik`` has). Against the exact grid value each row gives bias, sd, the mean delta
NSE (what one run reports about its scoring error) and the Pareto k-hat of the scoring weights
(median over runs; above 0.5 the weights' variance is not finite in practice and any sample
variance understates it: Vehtari, Simpson, Gelman, Yao and Gabry 2024, JMLR 25).

If sd/NSE is near 1 in the fixed-sampler rows, the delta NSE is honest about the scoring error and
what it misses comes from the sampler; if it is above 1 there, the scoring weights' tail is what it
misses.

    python experiments/eis_error_sources.py            # R = 60 (writes experiments/results/)
    python experiments/eis_error_sources.py --quick    # R = 6, T = 500, not written
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import jax
import jax.numpy as jnp
import numpy as np
from jax.scipy.special import logsumexp

import smle
from eis_accuracy import DESIGNS as ACCURACY_DESIGNS  # experiments/eis_accuracy.py
from smle.pareto_tail import pareto_k_hat
from smle.engine import eis
from smle.engine.kernel import _log_obs_function
from smle.errors import SmleInputError
from smle.models import get_model
from smle.validation import jax_params

RESULTS = Path(__file__).parent / "results"
DESIGNS = {name: params for name, (_, params) in ACCURACY_DESIGNS.items()}  # eis_accuracy's designs
SETTINGS = {"S64": eis.EISSettings(n_draws=64), "S32 score 512": eis.EISSettings(n_draws=32, n_score_draws=512)}


def stages(model, params, y, settings):
    """Compiled (fit: key -> auxiliary) and (score: auxiliary, key -> value, delta NSE, log weights)."""
    p = jax_params(params)
    data = model.prepare(p, jnp.asarray(y))
    state, log_obs, n_periods = model.latent(p), _log_obs_function(model), len(y)
    guess = model.mode_guess(p, data)

    @jax.jit
    def fit(key):
        fit_normals, _ = eis.standard_normals(key, n_periods, settings)
        return eis.fit_auxiliary(state, log_obs, (p, data), fit_normals, guess, settings)[0]

    @jax.jit
    def score(auxiliary, key):
        _, score_normals = eis.standard_normals(key, n_periods, settings)
        sampler = eis.assemble(state, auxiliary)
        paths = eis.draw_paths(sampler, score_normals)
        weights = eis.log_weights(sampler, log_obs((p, data), paths), paths)
        nse = eis.weight_diagnostics(weights, settings.antithetic)["nse_delta"]
        return logsumexp(weights) - jnp.log(weights.shape[0]), nse, weights

    return fit, score


def _k_hat(log_weights):
    try:
        return pareto_k_hat(log_weights).k_hat
    except SmleInputError:  # too few weights for a tail fit (S = 64)
        return float("nan")


def summarise(runs, exact):
    values = np.array([float(r[0]) for r in runs])
    nse = np.array([float(r[1]) for r in runs])
    k_hat = np.median([_k_hat(np.asarray(r[2])) for r in runs])
    sd = float(np.std(values, ddof=1))
    return {"bias": float(values.mean() - exact), "sd": sd, "nse": float(nse.mean()),
            "sd_over_nse": sd / float(nse.mean()), "k_hat": float(k_hat)}


def run(n_seeds, lengths, n_samplers, write):
    cells = {}
    for label, params in DESIGNS.items():
        model = get_model(label)
        for n_periods in lengths:
            y, _ = smle.simulate(model, params, n_periods, seed=2026)
            exact = smle.loglik(model, params, y, method="exact").value
            for name, settings in SETTINGS.items():
                start = time.perf_counter()
                fit, score = stages(model, params, y, settings)
                rows = {}
                for i in range(n_samplers):
                    auxiliary = fit(jax.random.PRNGKey(10_000 + i))
                    rows[f"fixed sampler {i + 1}"] = summarise(
                        [score(auxiliary, jax.random.PRNGKey(k)) for k in range(n_seeds)], exact)
                rows["both varied"] = summarise(
                    [score(fit(jax.random.PRNGKey(20_000 + k)), jax.random.PRNGKey(k)) for k in range(n_seeds)], exact)
                key = f"{label} T={n_periods} {name}"
                cells[key] = {"exact": exact, "rows": rows, "seconds": time.perf_counter() - start}
                print(key, json.dumps(cells[key]), flush=True)
    if write:
        (RESULTS / "eis_error_sources.json").write_text(json.dumps({"seeds": n_seeds, "cells": cells}, indent=1))
        write_markdown(cells, n_seeds)


def write_markdown(cells, n_seeds):
    lines = ["# Where the EIS error comes from: the sampler or the scoring draws", "",
             f"`experiments/eis_error_sources.py`, R = {n_seeds} runs per row, one data set per design and T; "
             "exact value from `smle.loglik(method=\"exact\")`. NSE: mean delta-method NSE of the runs; "
             "k-hat: median Pareto k-hat of the scoring weights.", "",
             "| design, T, setting | row | bias | sd | mean NSE | sd / NSE | k-hat |", "|---|---|---|---|---|---|---|"]
    for key, cell in cells.items():
        for row, r in cell["rows"].items():
            lines.append(f"| {key} | {row} | {r['bias']:+.3f} | {r['sd']:.3f} | {r['nse']:.3f} | "
                         f"{r['sd_over_nse']:.2f} | {r['k_hat']:.2f} |")
    (RESULTS / "eis_error_sources.md").write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--seeds", type=int, default=60)
    args = parser.parse_args()
    if args.quick:
        run(6, (500,), 2, write=False)
    else:
        run(args.seeds, (2000, 8000), 3, write=True)
