"""Exact references against outside ones: statsmodels' state-space filter, SciPy's quad."""

import jax.numpy as jnp
import numpy as np
import pytest
from scipy import integrate

import smle
from smle.engine import latent
from smle.reference import grid_filter, grid_loglik, kalman_filter, kalman_loglik, log_integral_adaptive

# Maximum-likelihood values for the Nile local level model, Durbin and Koopman, Time Series
# Analysis by State Space Methods, 2nd ed. (2012), section 2.10 (values recalled from memory of
# that book).
NILE_SIGMA2_EPS = 15099.0
NILE_SIGMA2_ETA = 1469.1


def test_kalman_exact_diffuse_matches_statsmodels_on_nile(nile):
    sm = pytest.importorskip("statsmodels.api")
    # Both sides: exact diffuse likelihood (Durbin and Koopman 2012, eq. 7.2), where the first
    # period contributes -log(2 pi)/2 and no prediction error.
    reference = sm.tsa.UnobservedComponents(nile, level="llevel", use_exact_diffuse=True)
    expected = reference.loglike(np.array([NILE_SIGMA2_EPS, NILE_SIGMA2_ETA]))
    state = latent.random_walk(np.sqrt(NILE_SIGMA2_ETA))
    ours = float(kalman_loglik(nile, state, NILE_SIGMA2_EPS, diffuse=True))
    assert ours == pytest.approx(expected, abs=1e-8)


def test_kalman_large_variance_start_matches_statsmodels_approximate_diffuse(nile):
    sm = pytest.importorskip("statsmodels.api")
    # statsmodels' default for this model: an approximate diffuse start with variance 1e6 and
    # the first period's contribution dropped (loglikelihood_burn = 1). Ours sums all periods,
    # so compare the sum from period 2 on, at the same initial variance.
    reference = sm.tsa.UnobservedComponents(nile, level="llevel")
    assert reference.loglikelihood_burn == 1
    expected = reference.loglike(np.array([NILE_SIGMA2_EPS, NILE_SIGMA2_ETA]))
    state = latent.random_walk(np.sqrt(NILE_SIGMA2_ETA), 0.0, 1e6)
    out = kalman_filter(nile, state, NILE_SIGMA2_EPS)
    v, f = np.asarray(out.innovation[1:]), np.asarray(out.innovation_var[1:])
    ours = -0.5 * np.sum(np.log(2 * np.pi) + np.log(f) + v**2 / f)
    assert ours == pytest.approx(expected, abs=1e-7)
    # and the large-variance likelihood converges to the exact diffuse one: L + log(kappa)/2
    diffuse = float(kalman_loglik(nile, state, NILE_SIGMA2_EPS, diffuse=True))
    big = latent.random_walk(np.sqrt(NILE_SIGMA2_ETA), 0.0, 1e12)
    assert float(kalman_loglik(nile, big, NILE_SIGMA2_EPS)) + 0.5 * np.log(1e12) == pytest.approx(diffuse, abs=1e-6)


def test_kalman_matches_statsmodels_for_stationary_ar1_plus_noise():
    sm = pytest.importorskip("statsmodels.api")
    model = smle.get_model("ar1-noise")
    params = dict(mu=0.0, phi=0.7, sigma_eta=0.8, sigma_eps=0.5)
    y, _ = smle.simulate(model, params, 500, seed=3)
    # statsmodels SARIMAX AR(1) with measurement error: stationary start on both sides
    reference = sm.tsa.SARIMAX(y, order=(1, 0, 0), measurement_error=True)
    assert reference.param_names == ["ar.L1", "var.measurement_error", "sigma2"]
    expected = reference.loglike(np.array([0.7, 0.5**2, 0.8**2]))
    ours = float(kalman_loglik(y, model.latent(params), 0.5**2))
    assert ours == pytest.approx(expected, abs=1e-8)


def test_grid_filter_is_exact_on_linear_gaussian_model():
    # the Kalman filter (checked above against statsmodels) is exact here
    model = smle.get_model("ar1-noise")
    params = dict(mu=1.0, phi=0.95, sigma_eta=0.3, sigma_eps=0.6)
    y, x = smle.simulate(model, params, 500, seed=7)
    exact = kalman_filter(y, model.latent(params), 0.36)
    grid = grid_filter(model, params, y, n_grid=1000)
    assert float(grid.loglik) == pytest.approx(float(exact.loglik), abs=1e-6)
    np.testing.assert_allclose(grid.filtered_mean, exact.filtered_mean, atol=1e-6)
    np.testing.assert_allclose(grid.filtered_sd**2, exact.filtered_var, rtol=1e-5)


def test_grid_filter_converges_in_grid_size_for_sv(sp500_returns):
    # Kitagawa (1987): the uniform rule converges quickly for smooth kernels; halving the grid
    # must move the log-likelihood by less than 1e-4 at T = 2780 (the accuracy the docs claim).
    params = dict(mu=-0.39, phi=0.988, sigma_eta=0.125)
    coarse = grid_loglik("sv", params, sp500_returns, n_grid=500)
    fine = grid_loglik("sv", params, sp500_returns, n_grid=1000)
    assert abs(coarse - fine) < 1e-4


def test_adaptive_gauss_hermite_matches_scipy_quad_per_period():
    # integral N(x; mu, s^2) N(y; 0, exp(x)) dx: the SV likelihood of one period with an
    # independent factor, by SciPy's adaptive quad as the reference
    mu, s = -0.4, 0.8
    ys = np.array([0.0, 0.3, -1.2, 4.5, 12.0])

    def integrand(x, y):
        return np.exp(-0.5 * ((x - mu) / s) ** 2) / (s * np.sqrt(2 * np.pi)) * np.exp(
            -0.5 * (np.log(2 * np.pi) + x + y * y * np.exp(-x))
        )

    expected = [np.log(integrate.quad(integrand, -30, 30, args=(y,), epsabs=0, epsrel=1e-12, limit=400)[0]) for y in ys]

    def log_integrand(x):
        yy = jnp.asarray(ys)[:, None]
        return -0.5 * ((x - mu) / s) ** 2 - jnp.log(s * jnp.sqrt(2 * jnp.pi)) - 0.5 * (
            jnp.log(2 * jnp.pi) + x + yy * yy * jnp.exp(-x)
        )

    ours = log_integral_adaptive(log_integrand, jnp.full(ys.shape, mu), n_nodes=32)
    np.testing.assert_allclose(np.asarray(ours), expected, atol=1e-9)
