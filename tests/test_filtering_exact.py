"""The exact route of smle.filter_factor and smle.diagnose (the Kalman filter, or the grid filter with
its backward pass) and the backward simulation of smoothing paths.

Outside references: statsmodels' state-space filter and smoother (SARIMAX(1,0,0) with measurement
error, a stationary start: filtered and smoothed states, their variances and lag-one smoothed
covariances, one-step forecast errors and their variances; Durbin and Koopman 2012, ch. 4) for
ar1-noise, reached both through the Kalman route and through the grid route (the grid filter run on
ar1-noise's own density); SciPy's normal CDF for the Gaussian predictive PITs (Rosenblatt 1952);
the guided particle filter (an independent simulation method) for sv.
"""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import stats

import smle
from smle.diagnostics.filtering_exact import grid_factor
from smle.engine import exact, exact_smoothing
from smle.exact_likelihood import ExactRun, exact_run, log_g_on

from conftest import JPR_DESIGNS

AR1 = smle.get_model("ar1-noise")
# mean 0: the state of statsmodels' SARIMAX(1,0,0) with measurement error is then x_t itself
AR1_ZERO_MEAN = dict(mu=0.0, phi=0.9, sigma_eta=0.5, sigma_eps=0.4)
PERCENT_DESIGN = {**JPR_DESIGNS["phi=0.95"], "mu": JPR_DESIGNS["phi=0.95"]["mu"] + 2 * np.log(100)}
N_PATHS = 1000


def as_jax(params):
    return {k: jnp.asarray(v, float) for k, v in params.items()}


@pytest.fixture(scope="module")
def ar1_reference():
    """ar1-noise (T = 500) and statsmodels' filter and smoother at the true parameters."""
    sm = pytest.importorskip("statsmodels.api")
    y = np.asarray(smle.simulate(AR1, AR1_ZERO_MEAN, 500, seed=11)[0])
    reference = sm.tsa.SARIMAX(y, order=(1, 0, 0), measurement_error=True)
    reference.ssm.tolerance = 0.0  # no switch to the steady-state gain (see test_exact.py)
    p = AR1_ZERO_MEAN
    smoothed = reference.smooth(np.array([p["phi"], p["sigma_eps"] ** 2, p["sigma_eta"] ** 2]))
    return y, smoothed


@pytest.fixture(scope="module")
def ar1_grid(ar1_reference):
    """filter_factor's grid route on ar1-noise: the grid filter run on its density (the public route
    takes the Kalman filter for this linear Gaussian model)."""
    y, _ = ar1_reference
    params = as_jax(AR1_ZERO_MEAN)
    data = AR1.prepare(params, jnp.asarray(y))
    out = exact.exact_filter(AR1.latent(params), lambda x: AR1.log_obs_density(params, data, x), len(y))
    run = ExactRun(float(out.loglik), np.asarray(out.log_predictive), np.asarray(out.filtered_mean),
                   np.asarray(out.filtered_sd), float(out.error_bound), out.size, "grid filter", out.spec)
    return grid_factor(AR1, params, y, run, with_cdf=True), run


def _assert_equals_statsmodels(result, smoothed, atol):
    z = stats.norm.ppf(0.95)
    filtered_sd = np.sqrt(smoothed.filtered_state_cov[0, 0])
    smoothed_sd = np.sqrt(smoothed.smoothed_state_cov[0, 0])
    np.testing.assert_allclose(result.filtered_mean, smoothed.filtered_state[0], atol=atol)
    np.testing.assert_allclose(result.filtered_sd, filtered_sd, atol=atol)
    np.testing.assert_allclose(result.smoothed_mean, smoothed.smoothed_state[0], atol=atol)
    np.testing.assert_allclose(result.smoothed_sd, smoothed_sd, atol=atol)
    np.testing.assert_allclose(result.log_predictive, smoothed.llf_obs, atol=atol)
    # one-step predictive CDF Phi(v_t / sqrt(F_t)) of statsmodels' forecast errors, by SciPy
    expected_pit = stats.norm.cdf(smoothed.forecasts_error[0] / np.sqrt(smoothed.forecasts_error_cov[0, 0]))
    np.testing.assert_allclose(result.pit[:, 0], expected_pit, atol=atol)
    # every law is Gaussian: the 5%/95% bands are mean -+ 1.6449 sd; the grid's quantiles come
    # from the sinc interpolant of its masses (measured 6.6e-7 off in test_exact.py)
    band_tol = max(atol, 2e-6)
    np.testing.assert_allclose(result.filtered_lower, smoothed.filtered_state[0] - z * filtered_sd, atol=band_tol)
    np.testing.assert_allclose(result.filtered_upper, smoothed.filtered_state[0] + z * filtered_sd, atol=band_tol)
    np.testing.assert_allclose(result.smoothed_lower, smoothed.smoothed_state[0] - z * smoothed_sd, atol=band_tol)
    np.testing.assert_allclose(result.smoothed_upper, smoothed.smoothed_state[0] + z * smoothed_sd, atol=band_tol)


def test_kalman_route_equals_statsmodels(ar1_reference):
    y, smoothed = ar1_reference
    result = smle.filter_factor(AR1, AR1_ZERO_MEAN, y)
    assert (result.method, result.engine, result.grid_size, result.error_bound) == ("exact", "Kalman filter", 0, 0.0)
    assert result.ess is None and result.n_particles is None and result.seed is None and not result.simulated
    _assert_equals_statsmodels(result, smoothed, 1e-10)
    assert result.loglik == pytest.approx(smoothed.llf, abs=1e-8)


def test_grid_route_equals_statsmodels(ar1_reference, ar1_grid):
    """The grid filter's filtered and smoothed moments, bands, predictive densities and PITs on
    ar1-noise, whose exact laws are Gaussian, against statsmodels to 1e-8."""
    _, smoothed = ar1_reference
    result, run = ar1_grid
    assert result.engine == "grid filter" and result.grid_size == run.spec.size and result.error_bound < 1e-6
    _assert_equals_statsmodels(result, smoothed, 1e-8)


def test_log_predictive_sums_to_the_exact_loglik():
    """filter_factor's log predictive densities add up to smle.loglik(method="exact") (the same exact
    filter: equal to rounding) on the grid route (sv) and the Kalman route (ar1-noise, local-level)."""
    cases = [("sv", PERCENT_DESIGN), ("ar1-noise", AR1_ZERO_MEAN),
             ("local-level", dict(sigma_eta=0.3, sigma_eps=0.8))]
    for name, params in cases:
        y, _ = smle.simulate(name, params, 500, seed=12)
        result = smle.filter_factor(name, params, y)
        assert result.method == "exact", name
        assert np.sum(result.log_predictive) == pytest.approx(result.loglik, abs=1e-9)
        assert result.loglik == pytest.approx(smle.loglik(name, params, y, method="exact").value, abs=1e-9), name


def test_particle_filter_agrees_with_the_exact_filter_on_sv():
    """The particle filter (2000 particles) against the exact grid filter, sv, T = 500.

    Measured over 30 seeds (100-129): sd of the particle log-likelihood 0.30, its mean 0.042 below
    the exact value (the log of an unbiased estimate is biased down by about sd^2 / 2 = 0.044);
    root mean square over periods of the filtered-mean error in filtered sd units 0.032 per run (sd
    0.006), and of the mean of 6 runs 0.0125-0.0147 (five groups of 6: the errors average out as
    1/sqrt(6), so they are Monte Carlo noise, not bias); the same for the PITs: 0.0014 per run,
    0.00056-0.00064 for 6 runs. Tolerances: 4 standard errors of the mean of 6 log-likelihoods plus
    the bias, and twice the expected root mean square of the 6-run means."""
    y, _ = smle.simulate("sv", PERCENT_DESIGN, 500, seed=12)
    exact_result = smle.filter_factor("sv", PERCENT_DESIGN, y)
    runs = [smle.filter_factor("sv", PERCENT_DESIGN, y, method="particles", seed=200 + s) for s in range(6)]
    assert all(r.method == "particles" and r.ess is not None for r in runs)
    loglik = np.mean([r.loglik for r in runs])
    assert abs(loglik - exact_result.loglik) < 4 * 0.30 / np.sqrt(6) + 0.05
    mean_error = np.mean([r.filtered_mean for r in runs], axis=0) - exact_result.filtered_mean
    assert np.sqrt(np.mean((mean_error / exact_result.filtered_sd) ** 2)) < 2 * 0.032 / np.sqrt(6)
    pit_error = np.mean([r.pit[:, 0] for r in runs], axis=0) - exact_result.pit[:, 0]
    assert np.sqrt(np.mean(pit_error**2)) < 2 * 0.0014 / np.sqrt(6)
    # the particle filter's filtered sd is the exact one's within its own noise (measured over these
    # 6 runs: largest relative error 0.10 at a period, mean over periods 0.015-0.017)
    assert np.mean(np.abs(runs[0].filtered_sd / exact_result.filtered_sd - 1)) < 0.05


def test_exact_route_is_causal():
    """The filtered law at t uses y_1..y_t only; the grid is chosen from the whole sample, so a
    change after t could move the values before t by the grid's accuracy (measured here: 3e-15, both
    samples got the same 96-point grid)."""
    y, _ = smle.simulate("sv", PERCENT_DESIGN, 500, seed=12)
    changed = y.copy()
    changed[300:] *= 3.0
    first, other = (smle.filter_factor("sv", PERCENT_DESIGN, v) for v in (y, changed))
    np.testing.assert_allclose(other.filtered_mean[:300], first.filtered_mean[:300], atol=1e-6)
    np.testing.assert_allclose(other.pit[:300], first.pit[:300], atol=1e-6)
    assert not np.allclose(other.smoothed_mean[:300], first.smoothed_mean[:300], atol=1e-3)


def _assert_paths_follow(paths, mean, var, lag_cov, label):
    """Sample mean, variance and lag-one covariance of ``paths`` (T, n) against the smoothing law,
    each within 5 Monte Carlo standard errors at every period (with 500 periods, a bound a correct
    sampler exceeds with probability below 0.001, by the union bound on normal tails). Measured on
    the grid with 6 other keys: largest |z| of the mean 2.9-3.4, of the variance 3.1-3.5 (3.7, 4.0
    and 3.3 with the key used here)."""
    n = paths.shape[1]
    z_mean = (paths.mean(axis=1) - mean) / np.sqrt(var / n)
    # the sample variance of n normal draws has standard error var sqrt(2 / n)
    z_var = (paths.var(axis=1, ddof=1) - var) / (var * np.sqrt(2.0 / n))
    centred = paths - paths.mean(axis=1, keepdims=True)
    cov = np.sum(centred[1:] * centred[:-1], axis=1) / (n - 1)
    # the sample covariance of a bivariate normal has variance (V_t V_{t+1} + C^2) / n
    z_cov = (cov - lag_cov) / np.sqrt((var[1:] * var[:-1] + lag_cov**2) / n)
    for what, z in (("mean", z_mean), ("variance", z_var), ("lag-one covariance", z_cov)):
        assert np.max(np.abs(z)) < 5.0, (label, what, float(np.max(np.abs(z))))


def test_backward_sampled_paths_follow_the_smoothing_law(ar1_reference, ar1_grid):
    """Paths drawn by backward simulation, on the grid (ar1-noise's density) and by the Gaussian
    sampler of the Kalman route, have the smoothed means, variances and lag-one covariances of
    statsmodels' smoother (Cov(x_{t+1}, x_t | y), its smoothed_state_autocov)."""
    y, smoothed = ar1_reference
    mean, var = smoothed.smoothed_state[0], smoothed.smoothed_state_cov[0, 0]
    lag_cov = smoothed.smoothed_state_autocov[0, 0, :-1]
    _, run = ar1_grid
    params = as_jax(AR1_ZERO_MEAN)
    state = AR1.latent(params)
    key = jax.random.PRNGKey(5)
    grid_paths = exact_smoothing.backward_sample(key, state, log_g_on(AR1, params, y, run.spec), run.spec, N_PATHS)
    assert grid_paths.shape == (500, N_PATHS)
    _assert_paths_follow(np.asarray(grid_paths), mean, var, lag_cov, "grid")
    kf = smle.reference.kalman_filter(y, state, AR1_ZERO_MEAN["sigma_eps"] ** 2)
    gaussian_paths = exact_smoothing.gaussian_backward_sample(key, kf.filtered_mean, kf.filtered_var,
                                                              kf.predicted_mean, kf.predicted_var, state, N_PATHS)
    _assert_paths_follow(np.asarray(gaussian_paths), mean, var, lag_cov, "Kalman")
    # the same key draws the same paths; another key others
    again = exact_smoothing.backward_sample(key, state, log_g_on(AR1, params, y, run.spec), run.spec, N_PATHS)
    np.testing.assert_array_equal(np.asarray(again), np.asarray(grid_paths))


def test_backward_sampled_sv_paths_average_to_the_smoothed_mean():
    """sv (T = 500): the mean and variance of 1000 backward-sampled paths at each period against the
    exact smoother's mean and variance from filter_factor, within 5 Monte Carlo standard errors;
    on the likelihood's grid and on the finer grid diagnose draws its path on."""
    y, _ = smle.simulate("sv", PERCENT_DESIGN, 500, seed=12)
    result = smle.filter_factor("sv", PERCENT_DESIGN, y)
    params = as_jax(PERCENT_DESIGN)
    model = smle.get_model("sv")
    state = model.latent(params)
    spec = exact_run(model, params, jnp.asarray(y)).spec
    var = result.smoothed_sd**2
    finer = exact_smoothing.path_grid(spec, state, float(state.sigma_eta) / 4)
    assert finer.spacing <= PERCENT_DESIGN["sigma_eta"] / 4 < spec.spacing
    for grid in (spec, finer):
        paths = np.asarray(exact_smoothing.backward_sample(jax.random.PRNGKey(9), state,
                                                           log_g_on(model, params, y, grid), grid, N_PATHS))
        z_mean = (paths.mean(axis=1) - result.smoothed_mean) / np.sqrt(var / N_PATHS)
        assert np.max(np.abs(z_mean)) < 5.0, (grid.size, float(np.max(np.abs(z_mean))))
        # the smoothed law of sv is not Gaussian: the variance's standard error from the sample's
        # own fourth moment, sqrt((m4 - var^2) / n)
        m4 = np.mean((paths - paths.mean(axis=1, keepdims=True)) ** 4, axis=1)
        z_var = (paths.var(axis=1, ddof=1) - var) / np.sqrt((m4 - var**2) / N_PATHS)
        assert np.max(np.abs(z_var)) < 5.0, (grid.size, float(np.max(np.abs(z_var))))
