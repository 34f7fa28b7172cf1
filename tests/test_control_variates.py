"""Control variates of the EIS log-likelihood (DESIGN section 4) and the separate scoring set.

Outside references: the Kitagawa (1987) grid filter (`smle.reference`, itself checked against
statsmodels and SciPy quadrature in test_reference.py), the Kalman filter for the linear Gaussian
case, and the NIG closed form of the independent case of `garch-mix` (checked against SciPy's
quad in test_model_garch_mix.py).
"""

import jax
import jax.numpy as jnp
import numpy as np
import pytest

import smle
from smle.engine import eis
from smle.engine.control import draw_statistics
from smle.errors import SmleInputError
from smle.reference import grid_loglik, kalman_loglik

from conftest import JPR_DESIGNS

GARCH = dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.06, beta=0.90, gamma=-0.4, rho=0.1, **{"lambda": 1.5})
N_SEEDS = 20
# the settings these tolerances were measured at (both draw sets of n_draws paths, tol 1e-6), not
# loglik's defaults: with 512 scoring draws and tol 1e-2 one of the 20 corrected garch-mix runs
# below was 0.10 from the grid value against a spread of about 0.02 (2026-12-03)
MEASURED_AT = dict(n_score_draws=None, tol=1e-6, max_iter=50)


@pytest.fixture(scope="module")
def garch_data():
    return smle.simulate("garch-mix", GARCH, 500, seed=13)[0]


@pytest.fixture(scope="module")
def garch_runs(garch_data):
    return [smle.loglik("garch-mix", GARCH, garch_data, n_draws=64, seed=s, control_variates="independent", method="eis",
                        **MEASURED_AT) for s in range(N_SEEDS)]


def test_independent_control_is_unbiased_against_the_grid_filter(garch_data, garch_runs):
    # measured over 20 seeds at this design (T = 500, S = 64): sd of the raw estimate 0.19, of
    # the corrected 0.032, mean corrected minus grid 0.0003; required: the mean within 4 standard
    # errors of the mean (measured spread) of the grid value, and every run within 4 sd
    exact = grid_loglik("garch-mix", GARCH, garch_data, n_grid=1000)
    corrected = np.array([r.value for r in garch_runs])
    sd = corrected.std(ddof=1)
    assert abs(corrected.mean() - exact) < 4 * sd / np.sqrt(N_SEEDS), (corrected.mean() - exact, sd)
    assert np.all(np.abs(corrected - exact) < 4 * sd)


def test_independent_control_reduces_the_variance_across_seeds(garch_runs):
    # measured: Var(raw) / Var(corrected) = 34.5 at rho = 0.1, T = 500 over 20 seeds (coefficient 1). With 19
    # degrees of freedom each, the ratio's 1% lower quantile is about 0.34 times the true ratio,
    # so a bound of 5 fails only if the true reduction is below about 15
    raw = np.array([r.value_uncorrected for r in garch_runs])
    corrected = np.array([r.value for r in garch_runs])
    assert raw.var(ddof=1) / corrected.var(ddof=1) > 5
    # the corrected estimate's single-run NSE (delta method on the weight differences) must not
    # understate its spread across seeds: measured 0.09 against 0.03
    assert np.mean([r.nse for r in garch_runs]) > 0.5 * corrected.std(ddof=1)
    # the coefficient is the slope of the log weights on the independent case's log weights:
    # measured 0.98 (sd 0.02 over seeds) at rho = 0.1, T = 2000, where the variance-minimising
    # coefficient across seeds was 1.01
    betas = np.array([r.cv_coefficients["independent"] for r in garch_runs])
    assert np.all((betas > 0.85) & (betas < 1.1)), betas
    r = garch_runs[0]
    assert r.value == pytest.approx(r.value_uncorrected - betas[0] * r.independent_error, abs=1e-9)


def test_regression_coefficient_does_no_harm_at_high_autocorrelation():
    # at rho = 0.9 the independent case's error is only loosely tied to the model's (correlation
    # 0.33 at T = 2000): subtracting it as it is (beta = 1) made the variance 7 times larger
    # there (experiments/results/control_variates.md), the regression coefficient did not
    params = {**GARCH, "rho": 0.9}
    y, _ = smle.simulate("garch-mix", params, 500, seed=13)
    runs = [smle.loglik("garch-mix", params, y, n_draws=64, seed=s, control_variates="independent", method="eis",
                        **MEASURED_AT) for s in range(N_SEEDS)]
    ones = [smle.loglik("garch-mix", params, y, n_draws=64, seed=s, control_variates="independent",
                        cv_coefficient=1.0, method="eis", **MEASURED_AT) for s in range(N_SEEDS)]
    raw = np.array([r.value_uncorrected for r in runs])
    regression = np.array([r.value for r in runs])
    one = np.array([r.value for r in ones])
    # F(19, 19): a variance ratio above 2.5 has probability about 2.5% when the variances are equal
    assert regression.var(ddof=1) < 2.5 * raw.var(ddof=1)
    assert one.var(ddof=1) > regression.var(ddof=1)


def test_controls_change_nothing_in_the_exact_gaussian_case():
    # AR(1) plus noise: EIS is exact at theta and at the independent parameters (every weight
    # equal), so both controls correct by zero and the value equals the Kalman filter's
    params = dict(mu=0.5, phi=0.8, sigma_eta=0.6, sigma_eps=0.9)
    y, _ = smle.simulate("ar1-noise", params, 40, seed=2)
    model = smle.get_model("ar1-noise")
    exact = float(kalman_loglik(y, model.latent(params), params["sigma_eps"] ** 2))
    for control in ("independent", "draws", "both"):
        r = smle.loglik("ar1-noise", params, y, n_draws=32, seed=1, control_variates=control, method="eis", **MEASURED_AT)
        assert r.value == pytest.approx(exact, abs=1e-8)
        assert r.nse < 1e-6 and np.isfinite(r.nse)


def test_draw_statistics_have_mean_zero_and_unit_variance():
    # the probabilists' Hermite polynomials are orthonormal (up to k!) under N(0, 1)
    # (Abramowitz and Stegun 1964, 22.2.15); checked on 40000 independent draws
    z = jax.random.normal(jax.random.PRNGKey(0), (50, 40000))
    stats = np.asarray(draw_statistics(z, antithetic=False))
    assert stats.shape == (40000, 4)
    # every product moment E[H_i H_j] = delta_ij, within 4 of its own standard errors (the
    # products are far from normal, so each error is measured from the draws themselves)
    n = stats.shape[0]
    assert np.all(np.abs(stats.mean(axis=0)) < 4 * stats.std(axis=0) / np.sqrt(n))
    products = stats[:, :, None] * stats[:, None, :]
    error = np.abs(products.mean(axis=0) - np.eye(4))
    assert np.all(error < 4 * products.std(axis=0) / np.sqrt(n)), error


def test_corrected_objective_gradient_matches_finite_differences():
    # the corrected log-likelihood is what fit maximises; its gradient (implicit differentiation of
    # both fixed points plus the quadrature's) must be exact: central differences, h = 1e-5
    fit_module = pytest.importorskip("smle.fit")
    from smle.engine.control import ControlSpec

    model = smle.get_model("sv")
    y, _ = smle.simulate(model, JPR_DESIGNS["phi=0.95"], 500, seed=31)
    settings = eis.EISSettings(n_draws=64, tol=1e-11, max_iter=200, tangent_tol=1e-10)
    compiled = fit_module.compiled_value_and_grad(model, settings, ControlSpec(independent=True))
    key = jax.random.PRNGKey(4)
    u = jnp.asarray(model.to_real(dict(mu=-7.2, phi=0.93, sigma_eta=0.3)))
    (_, aux), gradient = compiled(u, jnp.asarray(y), key)
    assert abs(float(aux[2]["independent_error"])) > 0  # the control is active
    h = 1e-5
    for i in range(3):
        e = jnp.zeros(3).at[i].set(h)
        (plus, _), _ = compiled(u + e, jnp.asarray(y), key)
        (minus, _), _ = compiled(u - e, jnp.asarray(y), key)
        assert float(gradient[i]) == pytest.approx((float(plus) - float(minus)) / (2 * h), rel=1e-5)


def test_larger_scoring_set(garch_data):
    # the sampler is fitted on 64 draws and scored on 512: log weights of that size, an NSE
    # smaller by about sqrt(8) (measured ratio 0.3-0.4 over seeds; required below 0.7)
    small = smle.loglik("garch-mix", GARCH, garch_data, n_draws=64, seed=3, method="eis", scoring="paths", **MEASURED_AT)
    large = smle.loglik("garch-mix", GARCH, garch_data, n_draws=64, seed=3, method="eis", scoring="paths",
                        **{**MEASURED_AT, "n_score_draws": 512})
    assert large.log_weights.shape == (512,) and large.paths.shape == (500, 512)
    assert large.n_score_draws == 512 and small.n_score_draws == 64
    assert large.nse < 0.7 * small.nse
    # the fitted sampler is the same (same fitting draws would need the same key split; here
    # only the estimate's agreement within the raw spread is required: 4 x 0.19)
    assert abs(large.value - small.value) < 4 * 0.19


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"control_variates": "bogus"}, "control_variates = 'bogus' is not accepted"),
        ({"control_variates": "independent", "cv_coefficient": float("nan")}, "cv_coefficient = nan"),
        ({"n_score_draws": 101}, "n_score_draws = 101 must be even"),
        ({"n_score_draws": 2}, "n_score_draws = 2 is not accepted"),
    ],
)
def test_bad_control_input(kwargs, match):
    y, _ = smle.simulate("sv", JPR_DESIGNS["phi=0.95"], 40, seed=1)
    with pytest.raises(SmleInputError, match=match):
        smle.loglik("sv", JPR_DESIGNS["phi=0.95"], y, n_draws=32, **kwargs, method="eis")


def test_model_without_independent_case_is_told_to_use_draws(nile):
    with pytest.raises(SmleInputError, match="'local-level' has no independent-factor case.*control_variates='draws'"):
        smle.loglik("local-level", dict(sigma_eps=120.0, sigma_eta=40.0), nile, control_variates="independent", method="eis")
    with pytest.raises(SmleInputError, match="has no independent-factor case"):
        smle.fit("local-level", nile, control_variates="both", method="eis")
