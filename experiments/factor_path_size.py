"""Size of the Ljung-Box test on the innovations of a drawn factor path, under the model itself.

`smle.diagnose` tests the standardised AR(1) innovations of one factor path drawn from the
smoothing distribution: under a correct model a path drawn *exactly* from the posterior has the law
of the true path, so its innovations are i.i.d. N(0, 1) and a 5% test rejects 5% of the time.
The path diagnose uses is one of the EIS scoring paths picked by its importance weight (sampling
importance resampling from S = 64 draws): an approximate posterior draw. This script measures the
rejection rate on samples simulated from the model, with

* "sir":  the path diagnose draws (`smle.diagnostics.gof.posterior_path`'s rule: EIS at the
          parameters, one of its scoring paths chosen with probability proportional to its weight);
* "ffbs": an exact draw from the grid posterior by forward filtering, backward sampling
          (Kitagawa 1987 grid filter; Carter and Kohn 1994 / Fruhwirth-Schnatter 1994 backward
          pass), a uniform jitter inside the grid cell.

Both at the true parameters (the path-drawing question only), or with ``--fitted`` at the
estimates of ``smle.fit`` (as diagnose does). Models `sv` and `garch-mix` at the README designs,
T = 2000, samples simulated with seeds 100, 101, ...

    python experiments/factor_path_size.py [--model sv] [--samples 30] [--n-grid 800] [--fitted]

Writes experiments/results/factor_path_size[_garch_mix][_fitted].json.
"""

from __future__ import annotations

import argparse
import json
import platform
from pathlib import Path

import jax
import jax.numpy as jnp
import numpy as np

import smle
from smle.diagnostics.gof import factor_innovations
from smle.diagnostics.residual_tests import ljung_box
from smle.engine.gaussian import log_normal_density
from smle.models import get_model

DESIGNS = {
    "sv": dict(mu=-7.36, phi=0.95, sigma_eta=0.26),
    "garch-mix": dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.06, beta=0.90, gamma=-0.4, rho=0.1, **{"lambda": 1.5}),
}
LAGS = (5, 10, 20)


def sir_path(model, params, y, seed: int, score_draws: int | None = None) -> np.ndarray:
    lik = smle.loglik(model, params, y, method="eis", scoring="paths", n_draws=64, seed=0, antithetic=True,
                      tol=1e-8, max_iter=100, n_score_draws=score_draws)
    weights = np.exp(lik.log_weights - lik.log_weights.max())
    index = np.random.default_rng(seed).choice(weights.shape[0], p=weights / weights.sum())
    return np.asarray(lik.paths[:, index], float)


def _filtered_masses(model, params, y, n_grid: int, width: float = 8.0):
    state = model.latent(params)
    sd = jnp.sqrt(state.init_var)
    grid = jnp.linspace(state.init_mean - width * sd, state.init_mean + width * sd, n_grid)
    data = model.prepare(params, y)
    log_obs = model.log_obs_density(params, data, jnp.broadcast_to(grid, (y.shape[0], n_grid)))
    log_transition = log_normal_density(grid[:, None], state.intercept + state.phi * grid[None, :],
                                        state.sigma_eta**2)  # [to, from]
    transition = jnp.exp(log_transition)
    initial = jnp.exp(log_normal_density(grid, state.init_mean, state.init_var))

    def update(predicted, log_g):
        joint = predicted * jnp.exp(log_g - jnp.max(log_g))
        return joint / jnp.sum(joint)

    def step(filtered, log_g):
        new = update(transition @ filtered, log_g)
        return new, new

    first = update(initial, log_obs[0])
    _, rest = jax.lax.scan(step, first, log_obs[1:])
    return np.asarray(grid), np.asarray(jnp.concatenate([first[None], rest])), np.asarray(transition)


def ffbs_path(model, params, y, seed: int, n_grid: int) -> np.ndarray:
    params = {k: jnp.asarray(v, float) for k, v in params.items()}
    grid, filtered, transition = _filtered_masses(model, params, jnp.asarray(y), n_grid)
    rng = np.random.default_rng(seed)
    n_periods = filtered.shape[0]
    index = np.empty(n_periods, int)
    index[-1] = rng.choice(n_grid, p=filtered[-1] / filtered[-1].sum())
    for t in range(n_periods - 2, -1, -1):
        p = filtered[t] * transition[index[t + 1], :]
        index[t] = rng.choice(n_grid, p=p / p.sum())
    spacing = grid[1] - grid[0]
    return grid[index] + rng.uniform(-0.5, 0.5, n_periods) * spacing


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--samples", type=int, default=30)
    parser.add_argument("--n-grid", type=int, default=800)
    parser.add_argument("--model", default="sv", choices=sorted(DESIGNS))
    parser.add_argument("--score-draws", type=int, default=None,
                        help="pick the EIS path among this many scoring draws (default: the 64 fitting draws)")
    parser.add_argument("--fitted", action="store_true",
                        help="draw the paths at the estimates of smle.fit (n_draws 64, seed 0), as diagnose does")
    args = parser.parse_args()
    model = get_model(args.model)
    design = DESIGNS[args.model]
    p_values = {"sir": [], "ffbs": []}
    for k in range(args.samples):
        y, _ = smle.simulate(model, design, 2000, seed=100 + k)
        y = np.asarray(y)
        params = smle.fit(model, y, n_draws=64, seed=0).params if args.fitted else design
        for name, path in (("sir", sir_path(model, params, y, k, args.score_draws)),
                           ("ffbs", ffbs_path(model, params, y, k, args.n_grid))):
            innovations = factor_innovations(model, params, path)
            _, p = ljung_box(innovations, LAGS)
            _, p_sq = ljung_box(innovations**2, LAGS)
            p_values[name].append(dict(innovations=[float(v) for v in p], squared=[float(v) for v in p_sq],
                                       lag1=float(np.corrcoef(innovations[1:], innovations[:-1])[0, 1])))
        print(k, {n: round(v[-1]["innovations"][1], 4) for n, v in p_values.items()}, flush=True)
    summary = {}
    for name, rows in p_values.items():
        inn = np.array([r["innovations"] for r in rows])
        sq = np.array([r["squared"] for r in rows])
        summary[name] = dict(
            rejections_at_5pct={f"lag {h}": int((inn[:, i] < 0.05).sum()) for i, h in enumerate(LAGS)},
            rejections_squared_at_5pct={f"lag {h}": int((sq[:, i] < 0.05).sum()) for i, h in enumerate(LAGS)},
            mean_lag1_autocorrelation=float(np.mean([r["lag1"] for r in rows])),
            sd_lag1_autocorrelation=float(np.std([r["lag1"] for r in rows], ddof=1)),
        )
    out = dict(model=args.model, params=design, at="estimates" if args.fitted else "true parameters", n_periods=2000, samples=args.samples, n_draws_sir=64, score_draws=args.score_draws,
               n_grid=args.n_grid, lags=LAGS, machine=platform.node(), summary=summary, p_values=p_values)
    suffix = ("" if args.model == "sv" else "_" + args.model.replace("-", "_")) + ("_fitted" if args.fitted else "") \
        + (f"_score{args.score_draws}" if args.score_draws else "")
    path = Path(__file__).parent / "results" / f"factor_path_size{suffix}.json"
    path.write_text(json.dumps(out, indent=1))
    print(json.dumps(summary, indent=1))


if __name__ == "__main__":
    main()
