"""Forecasts (smle.forecast) against outside references.

* garch, normal innovations: the h-step variance forecast in closed form (Engle and Bollerslev
  1986, Econometric Reviews 5) and the AR(1) mean forecast (Box and Jenkins 1970, ch. 5) (both
  references recalled from memory; the formulas follow from the recursions by iterated expectations);
* ar1-noise: the Kalman-filter forecast of statsmodels' SARIMAX (an AR(1) observed with
  measurement error), from smle's Kalman start and from its exact grid start;
* garch with NIG innovations, one step ahead: VaR and ES of scipy.stats.norminvgauss;
* a two-component normal mixture: VaR and ES against scipy.stats.norm, and the stated Monte Carlo
  errors against the spread measured over replications;
* sv at a long horizon: the stationary mean of the variance, exp(mu + sigma_x^2 / 2) (the
  log-normal mean; Taylor 1986, Modelling Financial Time Series, recalled from memory).

One data length (T = 300) and a few path shapes keep the compiled programs few.
"""

import dataclasses
import json

import numpy as np
import pytest
from scipy import optimize, stats

import smle
from smle.decision.forecast import Forecast, forecast_at, path_statistics
from smle.models import Model
from smle.models.ar1_noise import AR1Noise
from smle.results import CAUTION

T = 300
GARCH = {"mu": 0.03, "ar1": 0.1, "omega": 0.05, "alpha": 0.1, "beta": 0.85}
AR1 = {"mu": 0.5, "phi": 0.8, "sigma_eta": 0.6, "sigma_eps": 0.7}


def python_garch(params, returns):
    """Residuals and variances h_1..h_{T+1} by a plain loop (unconditional start)."""
    mu, ar1, omega, alpha, beta = (params[k] for k in ("mu", "ar1", "omega", "alpha", "beta"))
    h = [omega / (1 - alpha - beta)]
    residuals = []
    previous = mu / (1 - ar1)
    for r in returns:
        e = r - (mu + ar1 * previous if residuals else previous)
        residuals.append(e)
        h.append(omega + alpha * e**2 + beta * h[-1])
        previous = r
    return np.array(residuals), np.array(h)


@pytest.fixture(scope="module")
def garch_data():
    y, _ = smle.simulate("garch", GARCH, T, seed=11)
    return np.asarray(y)


def test_garch_variance_forecast_is_the_closed_form(garch_data):
    # Engle and Bollerslev (1986): E[h_{T+k}] = s2 + (alpha + beta)^{k-1} (h_{T+1} - s2),
    # s2 = omega / (1 - alpha - beta); and E[r_{T+k}] = mu (1 - ar1^k) / (1 - ar1) + ar1^k r_T.
    horizon, n_paths = 20, 20000
    result = forecast_at("garch", GARCH, garch_data, horizon, n_paths=n_paths, seed=0)
    _, h = python_garch(GARCH, garch_data)
    s2 = GARCH["omega"] / (1 - GARCH["alpha"] - GARCH["beta"])
    k = np.arange(1, horizon + 1)
    expected_h = s2 + (GARCH["alpha"] + GARCH["beta"]) ** (k - 1) * (h[-1] - s2)
    variance = result.stats["variance"]
    # one step ahead h_{T+1} is known: every path has it
    assert abs(variance["mean"][0] - h[-1]) < 1e-10 and variance["sd"][0] < 1e-10
    # Monte Carlo error of the mean variance: the reported sd / sqrt(n) against the spread of the
    # estimate over 30 seeds, measured ratio 0.7-1.1 per step (the spread of 30 values is itself
    # uncertain by 13%), z-scores averaging -0.2 to 0.1; at step 20 the error is 0.0053, 0.4% of
    # the mean 1.43. Tolerance 4.5 of them at every step.
    z = (variance["mean"][1:] - expected_h[1:]) / variance["mean_se"][1:]
    assert np.max(np.abs(z)) < 4.5, z
    ar1 = GARCH["ar1"]
    expected_mean = GARCH["mu"] * (1 - ar1**k) / (1 - ar1) + ar1**k * garch_data[-1]
    returns = result.stats["return"]
    assert np.max(np.abs(returns["mean"] - expected_mean) / returns["mean_se"]) < 4.5
    # Var(r_{T+1}) = h_{T+1}: the sample variance within 4.5 of its standard error h sqrt(2 / n)
    assert abs(returns["sd"][0] ** 2 - h[-1]) < 4.5 * h[-1] * np.sqrt(2 / n_paths)


@dataclasses.dataclass(frozen=True)
class GridAR1Noise(AR1Noise):
    """ar1-noise without its Gaussian-measurement hook: the exact method then runs the grid filter,
    so the forecast starts from draws of the grid's filtered masses."""

    gaussian_measurement = Model.gaussian_measurement


@pytest.fixture(scope="module")
def ar1_data():
    y, _ = smle.simulate("ar1-noise", AR1, T, seed=5)
    return np.asarray(y)


@pytest.mark.parametrize("model", [AR1Noise(), GridAR1Noise()], ids=["kalman-start", "grid-start"])
def test_ar1_noise_forecast_is_the_statsmodels_kalman_forecast(model, ar1_data):
    sm = pytest.importorskip("statsmodels.api")
    horizon, n_paths = 10, 20000
    # statsmodels' SARIMAX: y_t - mu an AR(1) with measurement error, stationary start; params
    # (ar.L1, var.measurement_error, sigma2)
    reference = sm.tsa.SARIMAX(ar1_data - AR1["mu"], order=(1, 0, 0), measurement_error=True)
    fitted = reference.filter(np.array([AR1["phi"], AR1["sigma_eps"] ** 2, AR1["sigma_eta"] ** 2]))
    assert abs(fitted.llf - smle.loglik("ar1-noise", AR1, ar1_data).value) < 1e-8
    law = fitted.get_forecast(horizon)
    mean, variance = np.asarray(law.predicted_mean) + AR1["mu"], np.asarray(law.var_pred_mean)
    result = forecast_at(model, AR1, ar1_data, horizon, n_paths=n_paths, seed=0)
    assert ("grid" in result.start) == isinstance(model, GridAR1Noise)
    returns = result.stats["return"]
    # Monte Carlo errors: means sd / sqrt(n); sample variances v sqrt(2 / n) (Gaussian law). Over
    # 30 seeds the z-scores below had mean within 0.3 of 0 and sd 0.7-1.3 per step (measured,
    # Kalman start). Tolerance 4.5.
    assert np.max(np.abs(returns["mean"] - mean) / returns["mean_se"]) < 4.5
    assert np.max(np.abs(returns["sd"] ** 2 - variance) / (variance * np.sqrt(2 / n_paths))) < 4.5
    # quantiles against scipy.stats.norm; standard error sqrt(p (1 - p) / n) / density (the
    # asymptotic law of a sample quantile)
    for row, p in enumerate(result.probabilities):
        exact = stats.norm.ppf(p, mean, np.sqrt(variance))
        se = np.sqrt(p * (1 - p) / n_paths) / stats.norm.pdf(exact, mean, np.sqrt(variance))
        assert np.max(np.abs(returns["quantiles"][row] - exact) / se) < 4.5, p


@pytest.mark.parametrize("name", ["garch", "garch-mix"])
def test_nig_one_step_var_and_es_are_scipy_norminvgauss(name):
    # garch with NIG innovations, and garch-mix at rho = 0 (the same law; the mixing state at T,
    # drawn from the grid filter, then carries no information on period T+1)
    params = {**GARCH, "gamma": -0.5, "lambda": 1.5}
    y, _ = smle.simulate(smle.get_model("garch", innovations="nig"), params, T, seed=3)
    y = np.asarray(y)
    model = smle.get_model("garch", innovations="nig") if name == "garch" else smle.get_model("garch-mix")
    if name == "garch-mix":
        params = {**params, "rho": 0.0}
    n_paths = 50000
    result = forecast_at(model, params, y, 1, levels=(0.01, 0.05), n_paths=n_paths, seed=1)
    _, h = python_garch(params, y)
    mean = params["mu"] + params["ar1"] * y[-1]
    lam, gamma = params["lambda"], params["gamma"]
    c = np.sqrt(1 + gamma**2 / lam)
    # scipy.stats.norminvgauss(a, b, loc, scale) is NIG(alpha = a / scale, beta = b / scale, mu = loc,
    # delta = scale); c z ~ NIG(sqrt(lambda + gamma^2), gamma, -gamma, sqrt(lambda)) (smle.models.garch)
    law = stats.norminvgauss(np.sqrt(lam + gamma**2) * np.sqrt(lam), gamma * np.sqrt(lam), loc=-gamma,
                             scale=np.sqrt(lam))
    scale = np.sqrt(h[-1]) / c
    for i, p in enumerate(result.levels):
        q = law.ppf(p)
        tail_mean = law.expect(lambda x: x, ub=q, conditional=True)
        var, es = -(mean + scale * q), -(mean + scale * tail_mean)
        # the stated errors were checked against replications in test_normal_mixture_var_es_and_errors
        assert abs(result.stats["return"]["var"][i][0] - var) < 4.5 * result.stats["return"]["var_se"][i][0]
        assert abs(result.stats["return"]["es"][i][0] - es) < 4.5 * result.stats["return"]["es_se"][i][0]
    # the variance about m_{T+1} given the state averages h_{T+1} (exactly h_{T+1} for garch)
    variance = result.stats["variance"]
    assert abs(variance["mean"][0] - h[-1]) < max(4.5 * variance["mean_se"][0], 1e-10)


def _mixture_quantile(p, weights, means, sds):
    def cdf(x):
        return sum(w * stats.norm.cdf(x, m, s) for w, m, s in zip(weights, means, sds))

    return optimize.brentq(lambda x: cdf(x) - p, -50, 50, xtol=1e-12)


def test_normal_mixture_var_es_and_errors():
    # 0.8 N(0.1, 1) + 0.2 N(-0.5, 3^2): a left-skewed, heavy-tailed law. VaR and ES from scipy:
    # the quantile by root finding on the mixture CDF, E[X 1{X <= q}] = sum_i w_i (m_i Phi(z_i)
    # - s_i phi(z_i)), z_i = (q - m_i) / s_i.
    weights, means, sds = np.array([0.8, 0.2]), np.array([0.1, -0.5]), np.array([1.0, 3.0])
    levels, n, replications = (0.01, 0.05), 20000, 200
    rng = np.random.default_rng(7)
    component = rng.random((replications, n)) < weights[1]
    draws = np.where(component, rng.normal(means[1], sds[1], (replications, n)),
                     rng.normal(means[0], sds[0], (replications, n)))
    out = path_statistics(draws, (0.5,), levels, tails=True)  # one "step" per replication
    for i, p in enumerate(levels):
        q = _mixture_quantile(p, weights, means, sds)
        z = (q - means) / sds
        tail = np.sum(weights * (means * stats.norm.cdf(z) - sds * stats.norm.pdf(z))) / p
        var, es = out["var"][i], out["es"][i]
        # the estimates centre on the exact values: mean over 200 replications within 4 standard
        # errors of that mean
        assert abs(var.mean() + q) < 4 * var.std(ddof=1) / np.sqrt(replications)
        assert abs(es.mean() + tail) < 4 * es.std(ddof=1) / np.sqrt(replications)
        # the stated Monte Carlo errors match the measured spread: the sd of 200 estimates has a
        # relative error of about 1 / sqrt(2 * 199) = 5%; measured ratios 1.01-1.07 here
        assert 0.8 < np.median(out["var_se"][i]) / var.std(ddof=1) < 1.2
        assert 0.8 < np.median(out["es_se"][i]) / es.std(ddof=1) < 1.2
    assert 0.8 < np.median(out["mean_se"]) / out["mean"].std(ddof=1) < 1.2


def test_sv_variance_reverts_to_the_log_normal_mean():
    # x_t stationary N(mu, sigma_eta^2 / (1 - phi^2)): after 40 steps at phi = 0.8 the start is
    # forgotten (0.8^40 = 1e-4), and E[exp(x)] = exp(mu + sigma_x^2 / 2).
    params = {"mu": -0.5, "phi": 0.8, "sigma_eta": 0.4}
    y, _ = smle.simulate("sv", params, T, seed=2)
    result = forecast_at("sv", params, np.asarray(y), 40, n_paths=20000, seed=0)
    assert "grid" in result.start
    stationary = np.exp(params["mu"] + 0.5 * params["sigma_eta"] ** 2 / (1 - params["phi"] ** 2))
    variance = result.stats["variance"]
    assert abs(variance["mean"][-1] - stationary) < 4.5 * variance["mean_se"][-1]


@pytest.fixture(scope="module")
def garch_fit(garch_data):
    return smle.fit("garch", garch_data, dates=[f"2031-01-{1 + d % 28:02d}" for d in range(T)])


def test_forecast_of_a_fit_outputs(garch_fit, tmp_path):
    result = smle.forecast(garch_fit, 5, levels=(0.05, 0.01), n_paths=2000, seed=4)
    assert result.levels == (0.01, 0.05) and result.last_date == garch_fit.dates[-1]
    again = smle.forecast(garch_fit, 5, levels=(0.05, 0.01), n_paths=2000, seed=4)
    np.testing.assert_array_equal(result.stats["return"]["var"], again.stats["return"]["var"])
    other = smle.forecast(garch_fit, 5, n_paths=2000, seed=5)
    assert not np.array_equal(result.stats["return"]["var"], other.stats["return"]["var"])
    np.testing.assert_allclose(result.value_at_risk(0.01), result.stats["return"]["var"][0])
    frame = result.to_frame()
    assert frame.shape[0] == 15 and {"VaR_0.01", "ES_0.05_se", "q_0.5"} <= set(frame.columns)
    assert frame.loc[("variance", 1), "VaR_0.01"] != frame.loc[("variance", 1), "VaR_0.01"]  # NaN
    text = result.summary()
    assert CAUTION in text and "VaR 0.01" in text
    back = Forecast.from_json(result.to_json(tmp_path / "f.json"))
    np.testing.assert_array_equal(back.stats["variance"]["quantiles"], result.stats["variance"]["quantiles"])
    assert json.loads((tmp_path / "f.json").read_text())["caution"] == CAUTION
    result.figure(tmp_path / "fan.png")
    assert (tmp_path / "fan.png").stat().st_size > 10000


def test_forecast_inputs_are_checked(garch_fit, garch_data):
    for bad in (dict(horizon=0), dict(horizon=2.5), dict(horizon=5000), dict(levels=(0.6,)), dict(levels=()),
                dict(n_paths=10), dict(seed=-1)):
        arguments = {"horizon": 3, **bad}
        with pytest.raises(smle.SmleInputError, match=next(iter(bad))):
            smle.forecast(garch_fit, **arguments)
    with pytest.raises(smle.SmleInputError, match="FitResult"):
        smle.forecast({"model": "garch"}, 3)
    with pytest.raises(smle.SmleInputError, match="one-dimensional latent state"):
        forecast_at("var1-noise", {}, garch_data, 3)
    with pytest.raises(smle.SmleInputError, match="y has shape"):
        smle.forecast(garch_fit, 3, y=np.ones((T, 2)))


def test_forecast_command(garch_fit, tmp_path, capsys):
    from smle.cli.app import main

    garch_fit.to_json(tmp_path / "result.json")
    code = main(["forecast", "--from-fit", str(tmp_path / "result.json"), "--horizon", "4", "--level", "0.02",
                 "--paths", "1000", "--report", str(tmp_path / "out")])
    assert code == 0
    assert "VaR 0.02" in capsys.readouterr().out
    assert {p.name for p in (tmp_path / "out").iterdir()} == {"forecast.txt", "forecast.json", "forecast.csv",
                                                              "forecast.png"}
    assert main(["forecast", "--from-fit", str(tmp_path / "result.json"), "--model", "sv"]) == 2
    assert main(["forecast", "--from-fit", str(tmp_path / "nothing.json")]) == 2


def test_sorted_quantiles_are_numpy_quantiles():
    from smle.decision.forecast import sorted_quantiles

    rng = np.random.default_rng(0)
    for n in (2, 101, 1000):
        x = rng.standard_t(3, size=(4, n))
        p = [0.0, 0.01, 0.05, 0.5, 0.95, 0.99, 1.0]
        np.testing.assert_allclose(sorted_quantiles(np.sort(x, axis=1), p), np.quantile(x, p, axis=1), rtol=0,
                                   atol=1e-12)
