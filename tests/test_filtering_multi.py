"""The guided particle filter in k dimensions (smle.filter_factor for a state of k > 1 dimensions)
and its smoothed factor per component.

Outside references:
* ``var1-noise``: the Kalman filter of ``smle.reference.kalman_var`` (Kalman 1960; itself checked
  against statsmodels' state-space likelihood in tests/test_eis_multi.py) for the log-likelihood
  and the filtered means; statsmodels' Kalman filter and smoother
  (``statsmodels.tsa.statespace.mlemodel.MLEModel``) for the one-step predictive laws behind the
  PITs and for the smoothed states;
* ``sv-2factor``: the two-dimensional point-mass grid filter (Kitagawa 1987, JASA 82) of
  ``smle.reference.grid2d``, whose accuracy is checked by refining its grid in
  tests/test_model_sv_2factor.py.

Tolerances are measured with experiments/filter_multi_accuracy.py (results/filter_multi_accuracy.md;
T = 300, 1000 particles, 20 seeds) and stated beside each check.
"""

import json

import jax.numpy as jnp
import numpy as np
import pytest
from scipy.stats import norm

import smle
from smle import cli
from smle.errors import SmleInputError
from smle.reference import grid2d_loglik
from smle.reference.kalman_var import kalman_filter_var

T, N = 300, 1000
VAR1 = dict(mu_1=0.5, mu_2=-0.3, phi_1=0.9, phi_2=0.6, sigma_eta_1=0.4, sigma_eta_2=0.5, sigma_eps_1=0.6,
            sigma_eps_2=0.3)
SV2 = dict(mu=0.2, phi1=0.98, sigma_eta1=0.6 * np.sqrt(1 - 0.98**2), phi2=0.5, sigma_eta2=0.4 * np.sqrt(0.75))


def _statsmodels_var1(model, params, y):
    """statsmodels' Kalman filter and smoother on the same linear Gaussian state-space model."""
    from statsmodels.tsa.statespace.mlemodel import MLEModel

    state = model.latent_var({k: jnp.asarray(v, float) for k, v in params.items()})
    reference = MLEModel(y, k_states=2)
    reference["design"] = np.eye(2)
    reference["obs_cov"] = np.diag([params["sigma_eps_1"] ** 2, params["sigma_eps_2"] ** 2])
    reference["transition"] = np.asarray(state.transition)
    reference["state_intercept"] = np.asarray(state.intercept)
    reference["selection"] = np.eye(2)
    reference["state_cov"] = np.asarray(state.innovation_cov)
    reference.initialize_known(np.asarray(state.init_mean), np.asarray(state.init_cov))
    reference.ssm.tolerance = 0.0  # the full recursion every period (see tests/test_eis_multi.py)
    return reference.ssm.smooth()


def test_var1_noise_filter_agrees_with_the_kalman_filter():
    pytest.importorskip("statsmodels")
    model = smle.get_model("var1-noise", n_series=2)
    y, _ = smle.simulate(model, VAR1, T, seed=1)
    state = model.latent_var({k: jnp.asarray(v, float) for k, v in VAR1.items()})
    kalman = kalman_filter_var(y, state, jnp.diag(jnp.array([VAR1["sigma_eps_1"], VAR1["sigma_eps_2"]]) ** 2))
    kalman_sd = np.sqrt(np.diagonal(np.asarray(kalman.filtered_cov), axis1=1, axis2=2))
    smoothed = _statsmodels_var1(model, VAR1, y)
    predictive_sd = np.sqrt(np.diagonal(smoothed.forecasts_error_cov, axis1=0, axis2=1))
    exact_pit = norm.cdf((y - smoothed.forecasts.T) / predictive_sd)
    smoothed_mean = smoothed.smoothed_state.T
    smoothed_sd = np.sqrt(np.diagonal(smoothed.smoothed_state_cov, axis1=0, axis2=1))
    for seed in range(3):
        result = smle.filter_factor(model, VAR1, y, n_particles=N, seed=seed)
        assert result.method == "particles" and result.state_dim == 2 and result.factor_names == ("x_1", "x_2")
        assert result.filtered_mean.shape == result.filtered_lower.shape == result.smoothed_upper.shape == (T, 2)
        # log L: sd over 20 seeds 0.364, largest |error| 0.65, mean error -0.06 (measured)
        assert abs(result.loglik - float(kalman.loglik)) < 4 * 0.364, (seed, result.loglik)
        # filtered means: the largest error over periods and components was 0.21 Kalman filtered
        # sds over 20 seeds (median 0.16)
        assert np.max(np.abs(result.filtered_mean - np.asarray(kalman.filtered_mean)) / kalman_sd) < 0.5
        assert np.all(result.filtered_lower < result.filtered_mean) and np.all(result.filtered_mean < result.filtered_upper)
        # PITs of each series against statsmodels' one-step predictive laws: largest error 0.031-0.047,
        # root mean square 0.0093-0.0104 over 5 seeds
        assert result.pit.shape == (T, 2)
        assert np.max(np.abs(result.pit - exact_pit)) < 0.1
        assert np.sqrt(np.mean((result.pit - exact_pit) ** 2)) < 0.02
        # smoothed by EIS, exact here: log g_t is quadratic, so the sampler is the smoothing law and
        # antithetic pairs put its mean on the paths' mean (measured error 1e-14 sds); the sds are
        # from 2000 paths (largest relative error 6-9% over 5 seeds), the bands within 0.22 sds
        assert np.max(np.abs(result.smoothed_mean - smoothed_mean) / smoothed_sd) < 1e-8
        assert np.max(np.abs(result.smoothed_sd / smoothed_sd - 1)) < 0.15
        assert np.max(np.abs(result.smoothed_lower - (smoothed_mean + norm.ppf(0.05) * smoothed_sd)) / smoothed_sd) < 0.4


def test_sv_2factor_filter_agrees_with_the_grid_filter():
    y, x = smle.simulate("sv-2factor", SV2, T, seed=3)
    exact = grid2d_loglik("sv-2factor", SV2, y)
    logliks = []
    for seed in range(3):
        result = smle.filter_factor("sv-2factor", SV2, y, n_particles=N, seed=seed)
        # sd over 20 seeds 0.186, largest |error| 0.50, mean error -0.05 (measured)
        assert abs(result.loglik - exact) < 4 * 0.186, (seed, result.loglik, exact)
        logliks.append(result.loglik)
    assert abs(np.mean(logliks) - exact) < 4 * 0.186 / np.sqrt(3)
    assert result.factor_names == ("x1 (persistent)", "x2 (fast)")
    assert result.pit.shape == (T, 1) and np.all((result.pit > 0) & (result.pit < 1))
    # the filtered and smoothed log variance follow the simulated one (a check that the components are
    # not swapped or mis-scaled; measured correlations 0.67 filtered, 0.70 smoothed for the persistent part)
    assert np.corrcoef(result.filtered_mean.sum(axis=1), x.sum(axis=1))[0, 1] > 0.5
    assert np.corrcoef(result.smoothed_mean[:, 0], x[:, 0])[0, 1] > 0.5


def test_exact_filtering_of_a_k_dimensional_state_is_refused_with_the_alternative():
    y, _ = smle.simulate("sv-2factor", SV2, 50, seed=0)
    with pytest.raises(SmleInputError, match="method = 'exact' needs a one-dimensional.*'particles' or 'auto'"):
        smle.filter_factor("sv-2factor", SV2, y, method="exact")


@pytest.mark.parametrize("name, options", [("sv-2factor", {}), ("factor-sv", {"n_series": 3}),
                                           ("var1-noise", {"n_series": 2})])
def test_k_dimensional_conditional_cdfs_equal_scipy(name, options):
    # reference: scipy.stats.norm; given the state every series is Gaussian (factor-sv: independent
    # across series with log variance a_i + b_i f_t + g_i,t; var1-noise: mean x_i,t, sd sigma_eps_i)
    model = smle.get_model(name, **options)
    y, _ = smle.simulate(model, model.start_params(np.random.default_rng(0).normal(size=(40, model.n_series))), 40)
    params = model.start_params(np.atleast_2d(np.asarray(y).T).T)
    x = np.random.default_rng(1).normal(scale=0.5, size=(40, 3, model.state_dim))
    values = {k: jnp.asarray(v, float) for k, v in params.items()}
    got = np.asarray(model.obs_cdf(values, model.prepare(values, jnp.asarray(y)), jnp.asarray(x)))
    y = np.asarray(y)
    if name == "sv-2factor":
        expected = norm.cdf(y[:, None], scale=np.exp((params["mu"] + x.sum(axis=-1)) / 2))
    elif name == "factor-sv":
        stem = lambda s: np.array([params[f"{s}_{i + 1}"] for i in range(3)])  # noqa: E731
        log_var = stem("a") + stem("b") * x[..., :1] + x[..., 1:]
        expected = norm.cdf(y[:, None, :], scale=np.exp(log_var / 2))
    else:
        expected = norm.cdf(y[:, None, :], loc=x, scale=np.array([params["sigma_eps_1"], params["sigma_eps_2"]]))
    assert got.shape == expected.shape
    np.testing.assert_allclose(got, expected, rtol=1e-10, atol=1e-14)


def test_diagnose_a_k_dimensional_fit(tmp_path):
    pytest.importorskip("statsmodels")
    # the fit of tests/test_model_var1_noise.py (same shape and settings: one compiled program); EIS is
    # exact for this linear Gaussian model, so the reference laws at the estimates are statsmodels'
    model = smle.get_model("var1-noise", n_series=2)
    truth = {"mu_1": 0.5, "mu_2": -1.0, "phi_1": 0.8, "phi_2": 0.4, "sigma_eta_1": 0.5, "sigma_eta_2": 0.7,
             "sigma_eps_1": 0.4, "sigma_eps_2": 0.6}
    y, _ = smle.simulate(model, truth, 100, seed=5)
    fit = smle.fit(model, y, n_draws=32, start=truth, method="eis")
    report = smle.diagnose(fit, n_particles=N, seed=0)
    assert report.filter.method == "particles" and report.pit.shape == (100, 2)
    reference = _statsmodels_var1(model, fit.params, y)
    exact_pit = norm.cdf((y - reference.forecasts.T) / np.sqrt(np.diagonal(reference.forecasts_error_cov, axis1=0,
                                                                             axis2=1)))
    # as in test_var1_noise_filter_agrees_with_the_kalman_filter (measured rms 0.009-0.010 at T = 300)
    assert np.sqrt(np.mean((report.pit - exact_pit) ** 2)) < 0.02
    # the path tests per component, on the standardised innovations computed here from the drawn path
    path = report.factor_path
    assert path.shape == (100, 2) and report.factor_innovations.shape == (99, 2)
    for j in range(2):
        mu, phi, sigma = (fit.params[f"{n}_{j + 1}"] for n in ("mu", "phi", "sigma_eta"))
        expected = (path[1:, j] - mu - phi * (path[:-1, j] - mu)) / sigma
        np.testing.assert_allclose(report.factor_innovations[:, j], expected, rtol=1e-10, atol=1e-12)
        assert sum(t.subject == f"factor innovations of x_{j + 1}" for t in report.tests) == 4  # 3 Ljung-Box, DW
    assert sum(t.subject.startswith("observation 2") for t in report.tests) == 12
    assert report.smoothed_mean.shape == (100, 2)
    assert len(report.write(tmp_path)) == 6 and "x_2" in (tmp_path / "diagnostics.txt").read_text()
    with pytest.raises(SmleInputError, match="method = 'exact' needs a one-dimensional latent state"):
        smle.diagnose(fit, method="exact")
    # the command line: `smle diagnose` of the saved fit writes the same report (same seed and particles)
    fit.to_json(tmp_path / "result.json")
    assert cli.main(["diagnose", str(tmp_path / "result.json"), "--particles", str(N), "--quiet", "--report",
                     str(tmp_path / "cli")]) == 0
    saved = json.loads((tmp_path / "cli" / "diagnostics.json").read_text())
    np.testing.assert_allclose(saved["pit"], report.pit, rtol=1e-12)
    assert np.shape(saved["filtered_mean"]) == (100, 2)


def test_check_of_k_dimensional_states_against_their_exact_references():
    # var1-noise: EIS is exact (quadratic log g_t), so every seed equals the Kalman filter to rounding
    model = smle.get_model("var1-noise", n_series=2)
    y, _ = smle.simulate(model, VAR1, T, seed=1)
    report = smle.check(model, VAR1, y, n_seeds=3, tail_draws=200, draws_grid=None)
    assert report.exact is not None and "Kalman filter" in report.reference
    assert np.max(np.abs(report.exact.errors)) < 1e-8 and report.degenerate and report.verdict == "healthy"
    # sv-2factor: the two-dimensional grid filter, checked against its refinement (bound measured 3e-9)
    y, _ = smle.simulate("sv-2factor", SV2, T, seed=3)
    report = smle.check("sv-2factor", SV2, y, n_seeds=5, tail_draws=200, draws_grid=None)
    assert report.exact is not None and "two-dimensional grid filter" in report.reference
    assert report.exact.error_bound < 1e-6
    assert abs(report.exact.loglik - grid2d_loglik("sv-2factor", SV2, y)) < 1e-6
    # measured over 5 seeds: errors -0.020 to +0.033 against reported NSEs near 0.03 (|error| / NSE below 1.1)
    assert np.all(np.abs(report.exact.errors) < 4 * report.single_nse)
    assert report.period_shares.shape == (T,) and abs(report.period_shares.sum() - 1) < 1e-8


def test_check_of_a_k_dimensional_state_without_a_reference_rests_on_the_spread():
    # factor-sv (state dimension 3): no grid covers it, so the report says so and judges the spread
    params = dict(phi_f=0.95, a_1=0.0, a_2=0.3, b_1=0.5, b_2=0.4, phi_1=0.9, phi_2=0.8, sigma_eta_1=0.3,
                  sigma_eta_2=0.35)
    model = smle.get_model("factor-sv", n_series=2)
    y, _ = smle.simulate(model, params, 200, seed=7)
    report = smle.check(model, params, y, n_seeds=3, tail_draws=200, draws_grid=None)
    assert report.exact is None and "no exact reference: 3-dimensional state" in report.reference
    assert np.all(np.isfinite(report.values)) and report.loglik_sd > 0
    assert "no exact reference: 3-dimensional state (no grid covers it): the error is judged from the spread" \
        in report.summary()


def test_factor_sv_filter_agrees_with_a_bootstrap_particle_filter():
    # reference: the NumPy bootstrap particle filter of tests/test_model_factor_sv.py (Gordon, Salmond and
    # Smith 1993), 3 runs of 20000 particles (sd of one run 0.063). Measured here over 12 seeds at 1000
    # particles: sd 0.33, mean minus the reference -0.13 (1.3 combined standard errors)
    from test_model_factor_sv import N_PARTICLES, PARAMS, PF_RUNS, PF_SD, _particle_filter

    model = smle.get_model("factor-sv", n_series=2)
    y, _ = smle.simulate(model, PARAMS, 200, seed=7)
    reference = np.mean([_particle_filter(y, N_PARTICLES, seed) for seed in range(PF_RUNS)])
    combined = np.sqrt(0.33**2 + PF_SD**2 / PF_RUNS)
    for seed in range(2):
        result = smle.filter_factor(model, PARAMS, y, n_particles=N, seed=seed, smooth=False)
        assert abs(result.loglik - reference) < 4 * combined, (seed, result.loglik, reference)
    assert result.factor_names == ("f", "g_1", "g_2") and result.filtered_mean.shape == (200, 3)
    assert result.pit.shape == (200, 2) and result.smoothed_mean is None
