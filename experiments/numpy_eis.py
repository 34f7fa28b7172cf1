"""The EIS algorithm of smle/engine/eis.py in plain NumPy, for the `sv` model: the speed baseline.

Same algorithm, step for step, as :func:`smle.engine.eis.eis_loglik` with the `sv` model:

* a Newton start (``n_newton`` expansions of log g_t about the sampler's mean path);
* EIS iterations: draw the fitting paths from the current sampler, regress log g_t for all
  periods at once on centred ``(1, d, d^2)`` (moments over the draws, vectorised over all T
  periods), map back to ``(b_obs, c_obs)``; stop when the largest relative change is below
  ``tol`` or after ``max_iter`` iterations;
* the sampler is assembled by the exact backward scalar recursion for ``log chi_{t+1}``;
* the log-likelihood is scored on a second, independent set of draws.

Arrays are vectorised over draws; Python loops over time appear only where the recursion
needs them: the forward path draw (over (S,) vectors) and the backward scalar assembly (plain
Python floats, the fastest scalar arithmetic NumPy-land offers). The common random numbers are
passed in, so the same standard normals give the same log-likelihood as smle.

Run ``python experiments/numpy_eis.py`` to check that it reproduces smle's log-likelihood for
the same normals (to ~1e-8) at a few sizes.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

LOG_2PI = math.log(2.0 * math.pi)


class Sampler(NamedTuple):
    """Assembled sampler, the NumPy twin of :class:`smle.engine.eis.Sampler` (arrays of shape (T,))."""

    mean_intercept: np.ndarray
    mean_slope: np.ndarray
    precision: np.ndarray
    weight_const: np.ndarray
    weight_linear: np.ndarray
    weight_quadratic: np.ndarray
    log_chi_first: float


def sv_state(mu: float, phi: float, sigma_eta: float):
    """Per-period transition intercept, slope and variance (period 1 carries the stationary law)."""
    init_var = sigma_eta**2 / (1.0 - phi**2)
    return mu * (1.0 - phi), phi, sigma_eta**2, mu, init_var


def sv_log_obs(y: np.ndarray, x: np.ndarray) -> np.ndarray:
    """log g_t(y_t | x_t) of `sv` at paths x of shape (T, S)."""
    return -0.5 * (LOG_2PI + x + (y * y)[:, None] * np.exp(-x))


def assemble(state, b_obs: np.ndarray, c_obs: np.ndarray) -> Sampler:
    """The backward scalar recursion of smle.engine.eis.assemble, in Python floats."""
    intercept, phi, sigma2, init_mean, init_var = state
    n = b_obs.shape[0]
    b_list = b_obs.tolist()
    c_list = c_obs.tolist()
    m_int = [0.0] * n
    m_slope = [0.0] * n
    prec = [0.0] * n
    w_const = [0.0] * n
    w_lin = [0.0] * n
    w_quad = [0.0] * n
    alpha_next = beta_next = gamma_next = 0.0
    log = math.log
    for t in range(n - 1, -1, -1):
        if t == 0:
            d, ph, v = init_mean, 0.0, init_var
        else:
            d, ph, v = intercept, phi, sigma2
        b = b_list[t] + beta_next
        c = c_list[t] + gamma_next
        floor = -0.99 / v
        if c < floor:
            c = floor
        p = 1.0 / v + c
        vp = v * p
        alpha = -0.5 * log(vp) + (-c * d * d + 2.0 * b * d + v * b * b) / (2.0 * vp)
        beta = ph * (b - c * d) / vp
        gamma = ph * ph * c / vp
        m_int[t] = (d / v + b) / p
        m_slope[t] = ph / vp
        prec[t] = p
        w_const[t] = alpha_next
        w_lin[t] = beta_next - b
        w_quad[t] = gamma_next - c
        alpha_next, beta_next, gamma_next = alpha, beta, gamma
    return Sampler(np.array(m_int), np.array(m_slope), np.array(prec), np.array(w_const),
                   np.array(w_lin), np.array(w_quad), alpha_next)


def draw_paths(sampler: Sampler, normals: np.ndarray) -> np.ndarray:
    """x_t = intercept_t + slope_t x_{t-1} + z_t / sqrt(P_t): the innovation part is vectorised
    over all periods, the recursion is a Python loop over time on (S,) vectors in place."""
    paths = sampler.mean_intercept[:, None] + normals / np.sqrt(sampler.precision)[:, None]
    slope = sampler.mean_slope.tolist()
    previous = paths[0]  # slope_1 = 0: x_1 needs no previous state
    scratch = np.empty_like(previous)
    for t in range(1, paths.shape[0]):
        current = paths[t]
        np.multiply(previous, slope[t], out=scratch)
        np.add(current, scratch, out=current)
        previous = current
    return paths


def mean_path(sampler: Sampler) -> np.ndarray:
    """The sampler's mean path (scalar recursion)."""
    intercept = sampler.mean_intercept.tolist()
    slope = sampler.mean_slope.tolist()
    out = [0.0] * len(intercept)
    previous = 0.0
    for t in range(len(intercept)):
        previous = intercept[t] + slope[t] * previous
        out[t] = previous
    return np.array(out)


def log_weights(sampler: Sampler, log_obs: np.ndarray, paths: np.ndarray) -> np.ndarray:
    per_period = (log_obs + sampler.weight_const[:, None] + sampler.weight_linear[:, None] * paths
                  - 0.5 * sampler.weight_quadratic[:, None] * paths**2)
    return sampler.log_chi_first + per_period.sum(axis=0)


def fit_quadratic(paths: np.ndarray, targets: np.ndarray):
    """All T regressions at once on centred regressors, as smle.engine.eis.fit_quadratic."""
    centre = paths.mean(axis=1)
    d = paths - centre[:, None]
    d2 = d * d
    m1, m2, m3, m4 = (v.mean(axis=1) for v in (d, d2, d2 * d, d2 * d2))
    y0, y1, y2 = (v.mean(axis=1) for v in (targets, d * targets, d2 * targets))
    yy = (targets * targets).mean(axis=1)
    s_dd = m2 - m1 * m1
    s_de = m3 - m1 * m2
    s_ee = m4 - m2 * m2
    s_dy = y1 - m1 * y0
    s_ey = y2 - m2 * y0
    det = s_dd * s_ee - s_de * s_de
    slope = (s_ee * s_dy - s_de * s_ey) / det
    curvature = (s_dd * s_ey - s_de * s_dy) / det
    b = slope - 2.0 * curvature * centre
    c = -2.0 * curvature
    s_yy = yy - y0 * y0
    explained = slope * s_dy + curvature * s_ey
    r_squared = np.where(s_yy > 1e-300, explained / np.where(s_yy > 1e-300, s_yy, 1.0), 1.0)
    return b, c, np.clip(r_squared, 0.0, 1.0)


def newton_start(state, y: np.ndarray, n_newton: int):
    """Expansions of log g_t about the mean path; `sv` derivatives are written out."""
    y2 = y * y

    def expand(point):
        scaled = y2 * np.exp(-point)
        c_obs = np.maximum(0.5 * scaled, 0.0)      # -d2 log g / dx2
        b_obs = (-0.5 + 0.5 * scaled) + c_obs * point  # d log g / dx + c x
        return b_obs, c_obs

    point = np.full(y.shape[0], state[3])  # smle's default mode guess: the state's mean
    for _ in range(n_newton):
        point = mean_path(assemble(state, *expand(point)))
    return expand(point)


def _relative_change(new, old):
    return max(float(np.max(np.abs(n - o) / (1.0 + np.abs(o)))) for n, o in zip(new, old))


def eis_loglik(params: dict, y: np.ndarray, fit_normals: np.ndarray, score_normals: np.ndarray,
               tol: float = 1e-6, max_iter: int = 50, n_newton: int = 5, antithetic: bool = True):
    """EIS log-likelihood of `sv` at ``params`` on ``y`` with the given (T, S) normals.

    Returns a dict: value, nse (delta method over antithetic pairs), ess, iterations, last_change.
    """
    state = sv_state(params["mu"], params["phi"], params["sigma_eta"])
    auxiliary = newton_start(state, y, n_newton)
    iterations, change = 0, math.inf
    while iterations < max_iter and change > tol:
        paths = draw_paths(assemble(state, *auxiliary), fit_normals)
        b, c, _ = fit_quadratic(paths, sv_log_obs(y, paths))
        change = _relative_change((b, c), auxiliary)
        auxiliary = (b, c)
        iterations += 1
    sampler = assemble(state, *auxiliary)
    paths = draw_paths(sampler, score_normals)
    weights = log_weights(sampler, sv_log_obs(y, paths), paths)
    top = weights.max()
    normalised = np.exp(weights - top)
    value = top + math.log(normalised.sum()) - math.log(weights.shape[0])
    units = 0.5 * (normalised[: len(normalised) // 2] + normalised[len(normalised) // 2:]) if antithetic else normalised
    nse = units.std(ddof=1) / math.sqrt(units.shape[0]) / units.mean()
    ess = normalised.sum() ** 2 / (normalised**2).sum()
    return {"value": value, "nse": nse, "ess": ess, "iterations": iterations, "last_change": change}


# ---------------------------------------------------------------------------------------------
# Check against smle


DESIGN = {"mu": -7.36, "phi": 0.95, "sigma_eta": 0.26}


def check_against_smle(n_periods: int, n_draws: int, seed: int = 0, tol: float = 0.0,
                       max_iter: int = 5) -> dict:
    """Run smle's compiled kernel and this NumPy version on the same normals; compare values."""
    import jax
    import jax.numpy as jnp

    import smle
    from smle.engine import eis
    from smle.engine.methods import compiled_eis

    model = smle.get_model("sv")
    y, _ = smle.simulate("sv", DESIGN, n_periods, seed=seed)
    settings = eis.EISSettings(n_draws=n_draws, tol=tol, max_iter=max_iter)
    key = jax.random.PRNGKey(seed + 1)
    params = {k: jnp.asarray(v, float) for k, v in DESIGN.items()}
    out, diagnostics = compiled_eis(model, settings)(params, jnp.asarray(y), key)
    fit_normals, score_normals = (np.asarray(a) for a in eis.standard_normals(key, n_periods, settings))
    mine = eis_loglik(DESIGN, np.asarray(y), fit_normals, score_normals, tol=tol, max_iter=max_iter,
                      n_newton=settings.n_newton)
    return {"T": n_periods, "S": n_draws, "tol": tol, "max_iter": max_iter,
            "smle": float(out.value), "numpy": mine["value"],
            "abs_diff": abs(float(out.value) - mine["value"]),
            "smle_iterations": int(out.info.iterations), "numpy_iterations": mine["iterations"],
            "nse_diff": abs(float(diagnostics["nse"]) - mine["nse"])}


def main() -> bool:
    ok = True
    for n_periods, n_draws, tol, max_iter in [(500, 32, 0.0, 5), (2000, 64, 0.0, 5),
                                              (2000, 128, 1e-6, 50), (8000, 32, 0.0, 5)]:
        row = check_against_smle(n_periods, n_draws, tol=tol, max_iter=max_iter)
        passed = row["abs_diff"] < 1e-8 and row["smle_iterations"] == row["numpy_iterations"]
        ok &= passed
        print(f"T={row['T']:5d} S={row['S']:4d} tol={tol:g} max_iter={max_iter}: smle {row['smle']:.10f} "
              f"numpy {row['numpy']:.10f} |diff| {row['abs_diff']:.2e} iterations "
              f"{row['smle_iterations']}/{row['numpy_iterations']} {'ok' if passed else 'MISMATCH'}")
    return ok


if __name__ == "__main__":
    raise SystemExit(0 if main() else 1)
