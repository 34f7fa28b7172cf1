"""Forecasts of sv-leverage (Yu 2005, J. Econometrics 127): its simulate_ahead hook and the filtered
start.

* From a fixed x_T and y_T, the simulated r_{T+1}, r_{T+2} and the 3-step cumulative return
  against an independent NumPy simulation of the model written out here (the first transition
  x_{T+1} | x_T, y_T ~ N(mu + phi (x_T - mu) + delta sigma_eta y_T exp(-x_T / 2),
  sigma_eta^2 (1 - delta^2)), then correlated (eps_t, eta_{t+1})): means, standard deviations
  and 5% quantiles within their Monte Carlo errors. Leverage skews the cumulative return to the
  left, which the comparison with delta = 0 confirms.
* delta = 0: the hook gives sv's paths from the same key (the same random streams).
* The forecast's start: draws of x_T whose mean is the exact filter's filtered mean at T (with
  leverage the filter's transition uses the data; the plain AR(1) transition would miss it).
* The one-step VaR of smle.forecast against the predictive law of an independent NumPy
  point-mass filter (tests/test_model_sv_leverage.py): P(r_{T+1} < -VaR_p) = p within the
  binomial error sqrt(p (1 - p) / n) of n paths.
"""

import numpy as np
import jax
import jax.numpy as jnp
import pytest

import smle
from smle.models import get_model
from test_model_sv_leverage import numpy_leverage_filter

LEVERAGE = {"mu": 0.0, "phi": 0.95, "sigma_eta": 0.3, "delta": -0.7}
N = 40000


def numpy_paths(params, x_t, y_t, horizon, n, seed):
    """Returns r_{T+1..T+h}, shape (h, n), by the model's equations (NumPy, its own random numbers)."""
    mu, phi, sigma, delta = (params[k] for k in ("mu", "phi", "sigma_eta", "delta"))
    rng = np.random.default_rng(seed)
    x = np.full(n, float(x_t))
    eps_previous = np.full(n, y_t * np.exp(-x_t / 2))
    returns = []
    for _ in range(horizon):
        eta = delta * eps_previous + np.sqrt(1 - delta**2) * rng.standard_normal(n)
        x = mu + phi * (x - mu) + sigma * eta
        eps_previous = rng.standard_normal(n)
        returns.append(np.exp(x / 2) * eps_previous)
    return np.array(returns)


def hook_paths(name, params, x_t, y_t, horizon, n, seed):
    model = get_model(name)
    values = {k: jnp.asarray(v, float) for k, v in params.items()}
    returns, variance, x = model.simulate_ahead(values, jnp.array([0.3, y_t]), jnp.full(n, float(x_t)), horizon,
                                                jax.random.PRNGKey(seed))
    return np.asarray(returns), np.asarray(variance), np.asarray(x)


def summaries(returns):
    """(mean, sd, 5% quantile) of r_{T+1}, r_{T+2} and r_{T+1} + r_{T+2} + r_{T+3}, with standard errors."""
    out = []
    for series in (returns[0], returns[1], returns[:3].sum(axis=0)):
        n, sd = series.size, series.std(ddof=1)
        q = np.quantile(series, 0.05)
        density = np.mean(np.abs(series - q) < 0.05 * sd) / (0.1 * sd)  # a kernel-free density estimate at q
        out.append(((series.mean(), sd / np.sqrt(n)), (sd, sd / np.sqrt(2 * n) * np.sqrt(1 + 0.5 * _kurtosis(series))),
                    (q, np.sqrt(0.05 * 0.95 / n) / density)))
    return out


def _kurtosis(series):
    centred = series - series.mean()
    return np.mean(centred**4) / np.mean(centred**2) ** 2 - 3


@pytest.mark.parametrize("y_t", [-2.0, 1.5])
def test_leverage_paths_match_an_independent_simulation(y_t):
    x_t = 0.4
    ours, _, x = hook_paths("sv-leverage", LEVERAGE, x_t, y_t, 3, N, seed=1)
    theirs = numpy_paths(LEVERAGE, x_t, y_t, 3, N, seed=2)
    # the first step's state: mean and sd of the Gaussian transition in closed form
    expected = LEVERAGE["phi"] * x_t + LEVERAGE["delta"] * LEVERAGE["sigma_eta"] * y_t * np.exp(-x_t / 2)
    sd = LEVERAGE["sigma_eta"] * np.sqrt(1 - LEVERAGE["delta"] ** 2)
    assert abs(x[0].mean() - expected) < 4.5 * sd / np.sqrt(N)
    assert abs(x[0].std() / sd - 1) < 4.5 / np.sqrt(2 * N)
    for mine, reference in zip(summaries(ours), summaries(theirs)):
        for (a, a_se), (b, b_se) in zip(mine, reference):
            # independent random numbers: within 4.5 combined standard errors (the sd's error with the
            # kurtosis correction, the quantile's from the density at q; both estimates, not exact)
            assert abs(a - b) < 4.5 * np.hypot(a_se, b_se), (mine, reference)
    # leverage at work: the 3-step cumulative return's lower tail is longer than with delta = 0
    plain, _, _ = hook_paths("sv-leverage", {**LEVERAGE, "delta": 0.0}, x_t, y_t, 3, N, seed=1)
    skew = [np.mean(((s := r[:3].sum(axis=0)) - s.mean()) ** 3) / s.std() ** 3 for r in (ours, plain)]
    assert skew[0] < skew[1] - 0.2, skew


def test_without_leverage_the_hook_is_svs():
    params = {**LEVERAGE, "delta": 0.0}
    ours = hook_paths("sv-leverage", params, 0.4, -2.0, 5, 1000, seed=3)
    sv = hook_paths("sv", {k: params[k] for k in ("mu", "phi", "sigma_eta")}, 0.4, -2.0, 5, 1000, seed=3)
    for a, b in zip(ours, sv):
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12)


def test_forecast_starts_from_the_leverage_filter():
    from smle.decision.forecast import end_state_draws, forecast_at, forecast_models
    from smle.exact_likelihood import exact_run

    y, _ = smle.simulate("sv-leverage", LEVERAGE, 300, seed=4)
    y = np.asarray(y)
    model = get_model("sv-leverage")
    values = {k: jnp.asarray(v, float) for k, v in LEVERAGE.items()}
    run = exact_run(model, values, y)
    draws, how = end_state_draws(model, values, jnp.asarray(y), 20000, jax.random.PRNGKey(0), run)
    draws = np.asarray(draws)
    assert "exact grid" in how
    # the grid draws' mean and sd: the filtered mean and sd of the exact filter at T
    assert abs(draws.mean() - run.filtered_mean[-1]) < 4.5 * run.filtered_sd[-1] / np.sqrt(draws.size)
    assert abs(draws.std() / run.filtered_sd[-1] - 1) < 4.5 / np.sqrt(2 * draws.size)
    # the whole forecast (smle.forecast of a fit goes through forecast_at with the estimates)
    result = forecast_at("sv-leverage", LEVERAGE, y, 5, n_paths=2000, seed=0)
    assert result.model == "sv-leverage" and np.all(np.isfinite(result.stats["return"]["var"]))
    assert "sv-leverage" in forecast_models()


def test_one_step_var_matches_a_numpy_point_mass_filter():
    from scipy import stats

    from smle.decision.forecast import forecast_at

    y = np.asarray(smle.simulate("sv-leverage", LEVERAGE, 150, seed=6)[0])
    n, levels = 40000, (0.01, 0.05)
    result = forecast_at("sv-leverage", LEVERAGE, y, 1, levels=levels, n_paths=n, seed=0)
    # x within 6 stationary sds of mu (0.96 each); the transition sd 0.21 spans 5.8 grid spacings
    _, x, density = numpy_leverage_filter(y, **LEVERAGE, lower=-6.0, upper=5.0, n_points=300)
    h = x[1] - x[0]
    for p in levels:
        var = result.value_at_risk(p)[0]
        coverage = h * np.sum(density * stats.norm.cdf(-var * np.exp(-x / 2)))
        # measured z-scores over seeds 0-2: -2.2, 1.6, 0.5 (1%) and -2.0, 0.8, 0.0 (5%)
        assert abs(coverage - p) < 4.5 * np.sqrt(p * (1 - p) / n), (p, coverage)
        assert abs(h * density.sum() - 1) < 1e-6  # the grid holds the predictive law
