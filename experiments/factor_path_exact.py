"""The exact factor-path draw of `smle.diagnose` (backward simulation on the grid), on how fine a grid?

`smle.diagnose` tests the standardised AR(1) innovations of one factor path drawn from the smoothing
distribution. For a one-dimensional state the path is drawn by backward simulation on the exact
filter's grid (`smle.engine.exact_smoothing.backward_sample`), so it takes grid values; this script
measures whether that lattice moves the path tests, on samples simulated from the model at the
true parameters (T = 2000, seeds 100, 101, ...), for paths drawn on

* "lik": the grid the exact likelihood chose (spacing about 0.5-0.8 transition sd),
* "r4", "r10": the same range at spacing <= sigma_eta / 4 and sigma_eta / 10,

beside the true path itself ("true"). Reported per path kind: the mean lag-1 autocorrelation of the
innovations (and its standard error over samples), their mean variance, the count of lag-10 Ljung-Box
rejections at 5% of the innovations and of their squares, and the seconds per draw.

    python experiments/factor_path_exact.py [--samples 60] [--model sv]

Writes experiments/results/factor_path_exact_<model>.md.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import jax
import jax.numpy as jnp
import numpy as np

import smle
from smle.diagnostics.factor_path import factor_innovations
from smle.diagnostics.residual_tests import ljung_box
from smle.engine import exact_smoothing
from smle.exact_likelihood import exact_run, log_g_on

DESIGNS = {
    "sv": dict(mu=-7.36, phi=0.95, sigma_eta=0.26),
    "garch-mix": dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.06, beta=0.90, gamma=-0.4, rho=0.1, **{"lambda": 1.5}),
}
KINDS = {"lik": None, "r4": 4, "r10": 10}


def draw(model, params, y, seed: int, cells_per_sd):
    state = model.latent(params)
    spec = exact_run(model, params, y).spec
    if cells_per_sd:
        spec = exact_smoothing.path_grid(spec, state, float(state.sigma_eta) / cells_per_sd)
    start = time.perf_counter()
    path = exact_smoothing.backward_sample(jax.random.PRNGKey(seed), state, log_g_on(model, params, y, spec), spec, 1)
    path = np.asarray(path[:, 0])
    return path, spec.size, time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--samples", type=int, default=60)
    parser.add_argument("--model", default="sv", choices=sorted(DESIGNS))
    args = parser.parse_args()
    model, design = smle.get_model(args.model), DESIGNS[args.model]
    params = {k: jnp.asarray(v, float) for k, v in design.items()}
    rows = {k: dict(lag1=[], var=[], reject=0, reject_sq=0, seconds=[], size=0) for k in ("true", *KINDS)}
    for k in range(args.samples):
        y, x = smle.simulate(model, design, 2000, seed=100 + k)
        paths = {"true": (np.asarray(x), 0, 0.0)}
        paths.update({kind: draw(model, params, jnp.asarray(y), k, cells) for kind, cells in KINDS.items()})
        for kind, (path, size, seconds) in paths.items():
            e = factor_innovations(model, design, path)
            row = rows[kind]
            row["lag1"].append(np.corrcoef(e[1:], e[:-1])[0, 1])
            row["var"].append(e.var())
            row["reject"] += ljung_box(e, [10])[1][0] < 0.05
            row["reject_sq"] += ljung_box(e**2, [10])[1][0] < 0.05
            row["seconds"].append(seconds)
            row["size"] = size
    lines = [f"# factor_path_exact: {args.model} at {design}, T = 2000, {args.samples} samples (true parameters)", "",
             "| path | grid points | lag-1 autocorrelation (se) | variance (se) | LB(10) rejections at 5% | "
             "LB(10) of squares | s per draw (median) |", "|---|---:|---:|---:|---:|---:|---:|"]
    for kind, row in rows.items():
        lag1, var, n = np.array(row["lag1"]), np.array(row["var"]), args.samples
        lines.append(f"| {kind} | {row['size'] or '-'} | {lag1.mean():.4f} ({lag1.std(ddof=1) / np.sqrt(n):.4f}) | "
                     f"{var.mean():.4f} ({var.std(ddof=1) / np.sqrt(n):.4f}) | {row['reject']} of {n} | "
                     f"{row['reject_sq']} of {n} | {np.median(row['seconds']):.3f} |")
    lines += ["", "Seconds include the grid's filter and one compile per grid size in the first sample (median over "
              "samples shown). Under the model the true path's innovations are i.i.d. N(0, 1); a draw from the "
              "exact smoothing distribution has the same law over samples."]
    out = Path(__file__).parent / "results" / f"factor_path_exact_{args.model.replace('-', '_')}.md"
    out.write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
