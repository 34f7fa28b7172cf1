"""fit(method="exact") and loglik(method=...): exact maximum likelihood for one-dimensional states,
against outside references (statsmodels' state-space MLE, published Nile estimates, an independent
grid maximiser, SciPy's NIG density through the closed-form garch fit), and EIS fits measured
against it."""

import jax.numpy as jnp
import numpy as np
import pytest

import smle
from smle import SmleInputError
from smle.exact_likelihood import resolve_method

from test_fit import _grid_maximiser


@pytest.fixture(scope="module")
def sp500_exact_fit(sp500_returns):
    return smle.fit("sv", sp500_returns, method="exact")


def test_auto_is_exact_for_one_dimensional_states_and_eis_otherwise():
    assert resolve_method(smle.get_model("sv"), "auto") == "exact"
    assert resolve_method(smle.get_model("garch-mix"), "auto") == "exact"
    assert resolve_method(smle.get_model("sv-2factor"), "auto") == "eis"
    assert resolve_method(smle.get_model("garch"), "exact") == "closed form"
    with pytest.raises(SmleInputError, match=r"method = 'exact' needs a one-dimensional latent state; model "
                                             r"'sv-2factor' has a 2-dimensional state"):
        resolve_method(smle.get_model("sv-2factor"), "exact")
    with pytest.raises(SmleInputError, match=r"method = 'grid' is not accepted; accepted: 'auto', 'exact' or 'eis'"):
        smle.loglik("sv", dict(mu=0.0, phi=0.9, sigma_eta=0.3), np.ones(20), method="grid")
    with pytest.raises(SmleInputError, match=r"exact_tol = 0 is not accepted"):
        smle.fit("sv", np.random.default_rng(0).normal(size=50), exact_tol=0)


def test_exact_fit_equals_the_grid_maximiser_on_sp500(sp500_returns, sp500_exact_fit):
    # an independent maximiser of a 600-point fixed-width grid likelihood (Kitagawa 1987), by SciPy's
    # L-BFGS-B: both maximise the same exact likelihood, so the estimates agree far inside a
    # standard error (required: 0.01 standard errors; the fixed grid's own error is ~1e-6 in log L)
    result = sp500_exact_fit
    assert result.converged, result.message
    assert result.method == "exact" and not result.simulated and result.nse == 0.0
    grid = _grid_maximiser(jnp.asarray(sp500_returns))
    for name in ("mu", "phi", "sigma_eta"):
        assert abs(result.params[name] - grid[name]) < 0.01 * result.std_errors[name], name
    assert result.loglik == pytest.approx(smle.reference.grid_loglik("sv", grid, sp500_returns, n_grid=1500),
                                          abs=1e-5)
    assert result.eis["error_bound"] <= 1e-6
    assert "exact: grid filter" in result.summary()


def test_exact_fit_standard_errors_equal_the_finite_difference_hessian(sp500_returns, sp500_exact_fit):
    # the Hessian of the exact log-likelihood by central differences of its values (h = 1e-3 in
    # the unconstrained coordinates; truncation ~1e-6 relative), mapped by the delta method, against
    # the fit's standard errors (central differences of the exact JAX gradient): 1e-3 relative
    model = smle.get_model("sv")
    result = sp500_exact_fit
    u = np.asarray(model.to_real(result.params))

    def value(v):
        return smle.loglik("sv", {k: float(x) for k, x in model.from_real(jnp.asarray(v)).items()}, sp500_returns,
                           exact_tol=1e-10).value

    h, k = 1e-3, len(u)
    hessian = np.zeros((k, k))
    for i in range(k):
        for j in range(k):
            ei, ej = np.eye(k)[i] * h, np.eye(k)[j] * h
            hessian[i, j] = (value(u + ei + ej) - value(u + ei - ej) - value(u - ei + ej) + value(u - ei - ej)) / (4 * h * h)
    jacobian = np.column_stack([np.asarray([float(x) for x in model.from_real(jnp.asarray(u + np.eye(k)[i] * 1e-6)).values()])
                                - np.asarray([float(x) for x in model.from_real(jnp.asarray(u - np.eye(k)[i] * 1e-6)).values()])
                                for i in range(k)]) / 2e-6
    covariance = jacobian @ np.linalg.inv(-hessian) @ jacobian.T
    for i, name in enumerate(model.param_names):
        assert result.std_errors[name] == pytest.approx(np.sqrt(covariance[i, i]), rel=1e-3), name


def test_ar1_noise_exact_fit_equals_statsmodels_state_space_mle():
    # y_t = x_t + e_t with a stationary AR(1) x_t is an ARMA(1,1); statsmodels' SARIMAX(1,0,0) with
    # measurement error is the same model, fitted by its own Kalman filter and optimiser
    sm = pytest.importorskip("statsmodels.api")
    params = dict(mu=0.0, phi=0.8, sigma_eta=0.6, sigma_eps=0.5)
    y, _ = smle.simulate("ar1-noise", params, 400, seed=21)
    y = y - y.mean()
    result = smle.fit("ar1-noise", y, fixed={"mu": 0.0})
    assert result.eis["engine"] == "Kalman filter"
    reference = sm.tsa.SARIMAX(y, order=(1, 0, 0), measurement_error=True, trend="n").fit(disp=False, method="lbfgs",
                                                                                          maxiter=500)
    assert reference.model.param_names == ["ar.L1", "var.measurement_error", "sigma2"]
    phi, sigma2_eps, sigma2_eta = reference.params
    assert result.loglik == pytest.approx(reference.llf, abs=1e-4)
    assert result.params["phi"] == pytest.approx(phi, abs=1e-3)
    assert result.params["sigma_eta"] ** 2 == pytest.approx(sigma2_eta, rel=5e-3)
    assert result.params["sigma_eps"] ** 2 == pytest.approx(sigma2_eps, rel=5e-3)


def test_nile_local_level_exact_fit_recovers_published_estimates(nile):
    # Durbin and Koopman (2012, section 2.10): sigma2_eps = 15099, sigma2_eta = 1469.1 (recalled from
    # memory of the book); the Kalman filter is the exact method of this linear Gaussian model
    result = smle.fit("local-level", nile)
    assert result.converged, result.message
    assert result.method == "exact" and result.eis["engine"] == "Kalman filter"
    assert result.params["sigma_eps"] ** 2 == pytest.approx(15099.0, rel=1e-3)
    assert result.params["sigma_eta"] ** 2 == pytest.approx(1469.1, rel=1e-3)
    assert smle.FitResult.from_json(result.to_json()).method == "exact"


def test_garch_mix_exact_fit_with_rho_zero_is_the_garch_nig_fit():
    # garch-mix at rho = 0 (ig link) is GARCH with NIG innovations exactly (their closed form uses
    # the NIG density checked against scipy.stats.norminvgauss in test_model_garch): the exact fit
    # with rho held at 0 must find the closed-form fit's estimates and log-likelihood
    nig = smle.get_model("garch", innovations="nig")
    params = {"mu": 0.02, "ar1": 0.05, "omega": 0.05, "alpha": 0.08, "beta": 0.88, "gamma": -0.3, "lambda": 1.2}
    names = nig.param_names
    y, _ = smle.simulate(nig, params, 500, seed=13)
    closed = smle.fit(nig, y)
    exact = smle.fit("garch-mix", y, fixed={"rho": 0.0}, method="exact")
    assert exact.loglik == pytest.approx(closed.loglik, abs=1e-5)
    for name in names:
        assert exact.params[name] == pytest.approx(closed.params[name], abs=1e-3 * closed.std_errors[name]), name
    back = smle.FitResult.from_json(exact.to_json())
    assert back.params == exact.params and back.eis == exact.eis and back.loglik == exact.loglik
    np.testing.assert_array_equal(back.smoothed_mean, exact.smoothed_mean)


def test_eis_fit_is_measured_against_the_exact_likelihood(sp500_returns, sp500_exact_fit):
    # the EIS fit reports the exact value at its estimate (equal to smle.loglik's exact value
    # there) and the exact maximum (equal to the exact fit's, to the optimisers' tolerance)
    eis_fit = smle.fit("sv", sp500_returns, n_draws=32, seed=0, method="eis")
    facts = eis_fit.eis
    at = smle.loglik("sv", eis_fit.params, sp500_returns).value
    assert facts["exact_loglik_at_estimate"] == pytest.approx(at, abs=1e-8)
    assert facts["simulation_error"] == pytest.approx(eis_fit.loglik - at, abs=1e-8)
    assert facts["exact_max_loglik"] == pytest.approx(sp500_exact_fit.loglik, abs=1e-5)
    assert -1e-6 <= facts["loss_against_exact"] < 0.05
    assert "against the exact likelihood" in eis_fit.summary()


def test_exact_loglik_result_says_how_it_was_computed(sp500_returns):
    params = dict(mu=-0.4, phi=0.98, sigma_eta=0.15)
    result = smle.loglik("sv", params, sp500_returns)
    assert result.method == "exact" and result.nse == 0.0 and result.error_bound <= 1e-6
    assert result.exact_engine.startswith("grid filter (")
    assert np.sum(result.log_predictive) == pytest.approx(result.value, abs=1e-9)
    assert "method='exact'" in repr(result)
    with pytest.raises(SmleInputError, match="has no simulated paths"):
        result.smoothed_mean()


def test_eis_settings_unused_by_the_exact_method_are_said():
    params = dict(mu=-0.4, phi=0.98, sigma_eta=0.15)
    y, _ = smle.simulate("sv", params, 100, seed=2)
    with pytest.warns(UserWarning, match=r"n_draws, seed are not used: model 'sv' is computed by the exact method"):
        smle.loglik("sv", params, y, n_draws=64, seed=4)
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # defaults, or method="eis", say nothing
        smle.loglik("sv", params, y)
        smle.loglik("sv", params, y, n_draws=32, seed=4, method="eis")
