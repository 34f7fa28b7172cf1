"""Reports that agree with themselves: each statement follows from the numbers printed beside it.

Sources: the Pareto k-hat limits of Vehtari, Simpson, Gelman, Yao and Gabry (2024, JMLR 25(72),
section 3: k-hat below min(1 - 1/log10 S, 0.7) is reliable, 0.7 and above is not; a GPD shape
above 1/2 means an infinite variance); the chi-square interval of a normal standard deviation
(any statistics text); the inverse Gaussian law of SciPy (``scipy.stats.invgauss``). The 20% and 1%
effective-sample-size rule is common practice.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from smle import report_text
from smle.diagnostics import gof, health, weight_tail
from smle.diagnostics.filtering import FilterResult
from smle.diagnostics.health_report import scaling_statement
from smle.pareto_tail import GeneralizedParetoFit
from smle.restricted import with_hessian as _with_hessian
from smle.models import get_model
from smle.results import CAUTION, FitResult


def _rules(text: str) -> list[str]:
    """Lines that are a full-width rule of one repeated character (the layout smle does not use)."""
    return [line for line in text.splitlines() if len(line.strip()) >= 20 and len(set(line.strip())) == 1]


def _fit_result(ess: float, n_draws: int = 64) -> FitResult:
    names = ["mu", "phi", "sigma_eta"]
    params = dict(mu=-7.4, phi=0.95, sigma_eta=0.26)
    return FitResult(
        model="sv", model_options={}, param_names=names, params=params, std_errors=dict.fromkeys(names, 0.01),
        conf_int={n: (v - 0.02, v + 0.02) for n, v in params.items()}, level=0.95, covariance=np.eye(3) * 1e-4,
        loglik=-100.0, nse=0.05, n_obs=40, aic=206.0, bic=211.0, converged=True,
        message="converged: gradient below tolerance", iterations=7, n_evaluations=20, grad_norm=1e-7,
        elapsed_seconds=1.0, start=dict(params),
        eis=dict(n_draws=n_draws, antithetic=True, seed=0, iterations=5, ess=ess, min_r_squared=0.9),
        factor_name="log variance x_t", smoothed_mean=np.zeros(40), smoothed_lower=np.zeros(40) - 1,
        smoothed_upper=np.zeros(40) + 1, log_weights=np.zeros(n_draws))


def test_report_layout_helpers():
    text = report_text.render(report_text.title("fit", "model sv"),
                              [report_text.block("Estimates", ["mu: 1", report_text.warning("look")]),
                               report_text.block("Empty", [])], "caution")
    assert text.splitlines() == ["smle fit -- model sv", "", "Estimates", "  mu: 1", "  ! look", "",
                                 "Note: caution"]
    assert report_text.warnings_in(text) == ["look"]


def test_fit_summary_warns_on_a_small_ess_and_uses_the_smle_layout():
    low = _fit_result(ess=8.0).summary()
    warnings = report_text.warnings_in(low)
    assert len(warnings) == 1 and "8.0" in warnings[0] and "20% of the 64 draws" in warnings[0]
    assert "common practice" in warnings[0]
    assert report_text.warnings_in(_fit_result(ess=16.0).summary()) == []  # 25% of 64: no warning
    assert low.startswith("smle fit -- model sv") and low.endswith(CAUTION)
    assert not _rules(low) and "P>|z|" not in low
    assert "Estimates" in low and "Simulation" in low and "sigma_eta" in low


def test_convergence_message_agrees_with_the_flag():
    problem = "the Hessian is not positive definite: not a strict maximum; no standard errors"
    converged, message = _with_hessian(True, "converged: gradient below tolerance", problem)
    assert converged is False and message.startswith("not converged: gradient below tolerance, but the Hessian")
    converged, message = _with_hessian(False, "not converged: reached max_steps = 3", problem)
    assert converged is False and message.startswith("not converged") and problem in message
    assert _with_hessian(True, "converged: gradient below tolerance", "") == (True, "converged: gradient below "
                                                                                    "tolerance")


def _k_hat(value: float, n_weights: int) -> weight_tail.ParetoKHat:
    fit = GeneralizedParetoFit(value, 1.0, 0.1, 0.1, 0.0, 20)
    good = min(1.0 - 1.0 / math.log10(n_weights), 0.7)  # Vehtari et al. (2024), sample-size limit
    return weight_tail.ParetoKHat(value, good, 134, n_weights, fit)


@pytest.mark.parametrize("value, severity", [(0.30, None), (0.62, "doubtful"), (0.69, "doubtful"),
                                             (0.75, "unreliable")])
def test_k_hat_reading_follows_its_printed_limits(value, severity):
    k = _k_hat(value, 2000)  # limit 1 - 1/log10(2000) = 0.697
    got, sentence = weight_tail.k_hat_reading(k)
    assert got == severity
    limits = weight_tail.k_hat_limits(k)
    assert "0.697" in limits and "0.5" in limits and "0.7" in limits
    if severity == "doubtful" and value < 0.697:
        # the case the old report got wrong: below the sample-size limit, but above 1/2
        assert "above 0.5" in sentence and "below the sample-size limit 0.697" in sentence


def test_tail_verdict_uses_the_same_reading():
    # Pareto draws with shape xi: k-hat near xi; measured over seeds 0-4 at S = 2000, k-hat within
    # 0.12 of xi, so xi = 0.62 lands in (0.5, 0.7) and xi = 0.2 below 0.5
    for xi, seed in ((0.2, 0), (0.62, 1)):
        weights = stats.genpareto.rvs(xi, size=2000, random_state=np.random.default_rng(seed))
        verdict = weight_tail.tail_verdict(np.log(weights + 1.0))
        severity, sentence = weight_tail.k_hat_reading(verdict.k_hat)
        assert sentence in verdict.reason
        if severity is not None:
            assert verdict.verdict == severity


class _Run:
    def __init__(self, value):
        self.value, self.nse = value, 0.0


def _runs_with_sd(sd: float, n_seeds: int, rng) -> list:
    z = rng.standard_normal(n_seeds)
    z = (z - z.mean()) / z.std(ddof=1)
    return [_Run(v) for v in sd * z]


def test_scaling_statement_follows_the_printed_intervals():
    rng = np.random.default_rng(3)
    grid = (16, 32, 64, 128, 256)
    rising = (3.3, 3.9, 4.6, 5.4, 6.1)  # NSE sqrt(S) growing with S
    # 40 seeds: the 95% intervals at 16 and 256 draws do not overlap, so the table is not flat from 16
    runs = {s: _runs_with_sd(v / math.sqrt(s), 40, rng) for s, v in zip(grid, rising)}
    rows, slope, slope_se, holds_from = health._scaling(runs, 40)
    sentence = scaling_statement(rows, slope, slope_se, holds_from)
    assert holds_from > 16 and "flat over the grid" not in sentence and "3.300 to 6.100" in sentence
    flat = [r for r in rows if r.n_draws >= holds_from]
    assert max(r.scaled_low for r in flat) <= min(r.scaled_high for r in flat)  # flat stretch: a common value
    before = [r for r in rows if r.n_draws < holds_from][-1]
    assert max(r.scaled_low for r in flat + [before]) > min(r.scaled_high for r in flat + [before])
    assert not before.consistent and all(r.consistent for r in flat)
    # 20 seeds: the intervals overlap, but the slope -0.28 is about 3 se from -1/2: not flat either
    runs = {s: _runs_with_sd(v / math.sqrt(s), 20, rng) for s, v in zip(grid, rising)}
    rows, slope, slope_se, holds_from = health._scaling(runs, 20)
    assert holds_from == 16 and (slope + 0.5) / slope_se > 2.58
    assert "so it is not flat" in scaling_statement(rows, slope, slope_se, holds_from)
    # a flat table: equal NSE sqrt(S), slope -1/2
    level = {s: _runs_with_sd(4.0 / math.sqrt(s), 20, rng) for s in grid}
    rows, slope, slope_se, holds_from = health._scaling(level, 20)
    assert holds_from == 16 and slope == pytest.approx(-0.5, abs=1e-9)
    assert scaling_statement(rows, slope, slope_se, holds_from).startswith("NSE sqrt(S) is flat over the grid")


def _diagnostics(lowest_ess: float) -> gof.Diagnostics:
    n = 50
    ess = np.full(n, 1500.0)
    ess[7] = lowest_ess
    f = FilterResult("sv", "log variance x_t", -10.0, np.zeros(n), np.zeros(n), np.zeros(n), np.zeros(n),
                     np.full((n, 1), 0.5), ess, 3, 2000, 0, 0.5)
    tests = [gof.TestResult("Ljung-Box", "return scores", 30.0, 10, 0.01),
             gof.TestResult("Ljung-Box", "factor innovations", 20.0, 10, 0.03, gof.FACTOR_PATH_LEVEL),
             gof.TestResult("Ljung-Box", "squared factor innovations", 40.0, 10, 1e-5, gof.FACTOR_PATH_LEVEL)]
    return gof.Diagnostics("sv", ["return"], f, np.full((n, 1), 0.5), np.zeros((n, 1)), np.zeros(n - 1), np.zeros(n),
                       np.zeros(n), np.zeros(n), np.zeros(n), tests, -10.0, 0.1)


def test_diagnose_report_flags_a_collapsed_filter_and_keeps_path_tests_apart():
    text = _diagnostics(3.0).summary()
    warnings = report_text.warnings_in(text)
    assert len(warnings) == 1 and "3.0 in period 7" in warnings[0] and "1% of the 2000 particles" in warnings[0]
    assert report_text.warnings_in(_diagnostics(900.0).summary()) == []
    assert not _rules(text) and text.endswith(CAUTION)
    # the observation test at p = 0.01 counts; the path test at p = 0.03 is shown but not flagged;
    # the path test at p = 1e-5, below FACTOR_PATH_LEVEL, is flagged: real misfit is not hidden
    flagged = [(t.subject, t.p_value) for t in _diagnostics(3.0).flagged]
    assert flagged == [("return scores", 0.01), ("squared factor innovations", 1e-5)]
    assert text.count("<- flagged") == 2 and "1 of 1 tests of the observations" in text
    assert "factor path: 2 of 2 tests below 0.05" in text and "1 below 0.01" in text


def test_garch_mix_shows_its_mixing_factor():
    model = get_model("garch-mix")
    params = dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.06, beta=0.90, gamma=-0.4, rho=0.1, **{"lambda": 1.5})
    x = np.linspace(-3.0, 3.0, 13)
    values, label = model.factor_display(params, x)
    # W = F^{-1}(Phi(x)) for the inverse Gaussian of mean 1 and shape lambda: SciPy's invgauss with
    # mu = mean / shape and scale = shape
    expected = stats.invgauss.ppf(stats.norm.cdf(x), 1.0 / 1.5, scale=1.5)
    np.testing.assert_allclose(values, expected, rtol=1e-6)
    assert np.all(np.diff(values) > 0) and "mixing factor W_t" in label
    sv_values, sv_label = get_model("sv").factor_display(dict(mu=-7.36, phi=0.95, sigma_eta=0.26), x)
    np.testing.assert_allclose(sv_values, np.exp(x / 2))
    assert "exp(x_t / 2)" in sv_label
    default_values, default_label = get_model("ar1-noise").factor_display({}, x)
    np.testing.assert_array_equal(default_values, x)
    assert default_label == get_model("ar1-noise").factor_name


def test_titles_name_the_options_that_differ_from_the_defaults():
    # Two fits of one ladder that differ only in an option must not share a title.
    from smle.models import model_title

    assert model_title("sv", {}) == "sv" and model_title("sv", None) == "sv"
    assert model_title("garch-mix", {"link": "ig", "realized": False}) == "garch-mix"  # the defaults
    assert model_title("garch-mix", {"link": "lognormal", "realized": False}) == "garch-mix (link=lognormal)"
    assert model_title("sv", {"name": "sv"}) == "sv"  # a class attribute saved by an early version
    import dataclasses

    result = dataclasses.replace(_fit_result(ess=16.0), model="garch-mix", model_options={"link": "lognormal"})
    assert result.summary().startswith("smle fit -- model garch-mix (link=lognormal)")
