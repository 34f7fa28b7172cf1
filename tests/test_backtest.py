"""Backtests (smle.backtest) of a correctly specified garch on simulated data.

* the hits of the rolling one-step VaR cover at their nominal rate: Kupiec (1995) and
  Christoffersen (1998) tests (their statistics checked against the published formulas in
  tests/test_decision_tests.py);
* the out-of-sample log score is the normal log density of scipy.stats.norm at the GARCH(1,1)
  mean and variance of the window (Bollerslev 1986), recomputed by a plain loop;
* the Diebold-Mariano (1995) comparison of two backtests over the same periods.

The estimation window is 300 periods, the data length of tests/test_forecast.py, so that the
compiled programs are shared.
"""

import numpy as np
import pytest
from scipy import stats

import smle
from smle.decision.backtest import Backtest, backtest
from smle.results import CAUTION

WINDOW, N_FORECASTS = 300, 400
GARCH = {"mu": 0.03, "ar1": 0.0, "omega": 0.05, "alpha": 0.1, "beta": 0.85}


@pytest.fixture(scope="module")
def data():
    y, _ = smle.simulate("garch", GARCH, WINDOW + N_FORECASTS, seed=21)
    return np.asarray(y)


@pytest.fixture(scope="module")
def normal_backtest(data):
    return backtest("garch", data, WINDOW, 100, levels=(0.01, 0.05), n_paths=5000, seed=0, fixed={"ar1": 0.0},
                    progress=False)


def _window_garch(params, window_returns):
    """m_{t} and h_{t} of the period after a window, by a plain loop (unconditional start)."""
    mu, omega, alpha, beta = params["mu"], params["omega"], params["alpha"], params["beta"]
    h = omega / (1 - alpha - beta)
    for r in window_returns:
        h = omega + alpha * (r - mu) ** 2 + beta * h
    return mu, h


def test_correct_garch_covers_at_the_nominal_rate(normal_backtest, data):
    b = normal_backtest
    assert b.periods[0] == WINDOW and b.periods.size == N_FORECASTS and len(b.refits) == 4
    np.testing.assert_array_equal(b.realized, data[WINDOW:])
    np.testing.assert_array_equal(b.hits, (b.realized[None, :] < -b.value_at_risk).astype(int))
    for entry in b.coverage():
        # a correct model: 400 forecasts give 4 (1%) and 20 (5%) expected hits; the tests must not
        # reject at 1% (a wrong sign or scale of the VaR gives hit rates near 99% or far off)
        assert entry["kupiec"].p_value > 0.01, entry
        assert entry["conditional"].p_value > 0.01, entry
        assert abs(entry["kupiec"].hit_rate - entry["level"]) < 4 * np.sqrt(entry["level"] / N_FORECASTS)
    # warm starts: every estimate near the truth (T = 300, standard errors of alpha and beta about 0.05)
    for refit in b.refits:
        assert refit["converged"] and abs(refit["params"]["alpha"] + refit["params"]["beta"] - 0.95) < 0.15


def test_log_score_is_the_normal_density_at_the_window_garch(normal_backtest, data):
    b = normal_backtest
    for step in (0, 57, 100, 399):
        t = b.periods[step]
        params = [r for r in b.refits if r["period"] <= t][-1]["params"]
        mean, h = _window_garch(params, data[t - WINDOW:t])
        assert abs(b.log_score[step] - stats.norm.logpdf(data[t], mean, np.sqrt(h))) < 1e-9


def test_a_start_on_the_boundary_is_not_used(data):
    # the previous estimate of a stuck fit: omega near 0, alpha + beta near 1. Started there, L-BFGS
    # stops 2.9 below the maximum and reports convergence (measured); the refit starts afresh.
    from smle.decision.backtest import _refit

    stuck = {"mu": 0.0, "ar1": 0.0, "omega": 1e-12, "alpha": 0.0246, "beta": 0.9754 - 1e-9}
    model = smle.get_model("garch")
    fresh = smle.fit(model, data[:WINDOW], fixed={"ar1": 0.0}, verbose=False)
    assert fresh.converged
    refit = _refit(model, data[:WINDOW], stuck, seed=0, fixed={"ar1": 0.0})
    assert abs(refit.loglik - fresh.loglik) < 1e-6


def test_outputs_and_comparison(normal_backtest, data, tmp_path):
    b = normal_backtest
    text = b.summary()
    assert CAUTION in text and "Kupiec" in text
    frame = b.to_frame()
    assert frame.shape[0] == N_FORECASTS and {"VaR_0.01", "hit_0.05", "log_score"} <= set(frame.columns)
    assert b.to_json(tmp_path / "b.json") and (tmp_path / "b.json").stat().st_size > 1000
    b.figure(tmp_path / "b.png")
    # against the same model with the mean held at 0 (the compiled programs are shared)
    other = backtest("garch", data, WINDOW, 200, n_paths=5000, seed=0, fixed={"ar1": 0.0, "mu": 0.0},
                     progress=False)
    test = b.compare(other)
    assert test.n_periods == N_FORECASTS and np.isfinite(test.statistic)
    assert abs(test.mean_difference - np.mean(b.log_score - other.log_score)) < 1e-12
    with pytest.raises(smle.SmleInputError, match="same periods"):
        b.compare("not a backtest")
    # a model scoring two series a day (return and realized measure) is not comparable
    import dataclasses
    realized = dataclasses.replace(other, model="garch-mix", model_options={"realized": True})
    with pytest.raises(smle.SmleInputError, match="log scores compare only forecasts of the same observations"):
        b.compare(realized)


def test_backtest_inputs_are_checked(data):
    for bad, match in ((dict(window=5), "window"), (dict(window=len(data)), "window"), (dict(refit_every=0),
                       "refit_every"), (dict(levels=(0.9,)), "levels")):
        arguments = {"window": WINDOW, "refit_every": 50, **bad}
        with pytest.raises(smle.SmleInputError, match=match):
            backtest("garch", data, progress=False, **arguments)
    with pytest.raises(smle.SmleInputError, match="one-dimensional"):
        backtest("var1-noise", np.ones((400, 2)), WINDOW, 50, progress=False)
    assert isinstance(smle.backtest, type(backtest)) and smle.Backtest is Backtest


def test_backtest_command(data, tmp_path, capsys):
    import pandas as pd

    from smle.cli.app import main

    pd.DataFrame({"ret": data[:WINDOW + 20]}).to_csv(tmp_path / "d.csv", index=False)
    code = main(["backtest", str(tmp_path / "d.csv"), "--model", "garch:ar1=0", "--window", str(WINDOW),
                 "--refit-every", "10", "--paths", "1000", "--level", "0.05", "--quiet", "--report",
                 str(tmp_path / "out")])
    assert code == 0
    out = capsys.readouterr().out
    assert "20 one-step forecasts" in out and "Kupiec" in out
    assert {p.name for p in (tmp_path / "out").iterdir()} == {"backtest.txt", "backtest.json", "backtest.csv",
                                                              "backtest.png"}
    assert main(["backtest", str(tmp_path / "d.csv"), "--window", str(WINDOW + 20)]) == 2


def test_latent_state_log_scores_are_statsmodels_kalman_densities():
    # ar1-noise: the one-step predictive density of y_t given the window is Gaussian with the
    # Kalman filter's moments; statsmodels' SARIMAX (AR(1) plus measurement error) gives it
    sm = pytest.importorskip("statsmodels.api")
    truth = {"mu": 0.5, "phi": 0.8, "sigma_eta": 0.6, "sigma_eps": 0.7}
    y, _ = smle.simulate("ar1-noise", truth, WINDOW + 6, seed=5)
    y = np.asarray(y)
    b = backtest("ar1-noise", y, WINDOW, 6, levels=(0.05,), n_paths=2000, seed=0, progress=False)
    params = b.refits[0]["params"]
    for step, t in enumerate(b.periods):
        reference = sm.tsa.SARIMAX(y[t - WINDOW:t + 1] - params["mu"], order=(1, 0, 0), measurement_error=True)
        fitted = reference.filter(np.array([params["phi"], params["sigma_eps"] ** 2, params["sigma_eta"] ** 2]))
        assert abs(b.log_score[step] - fitted.llf_obs[-1]) < 1e-8
