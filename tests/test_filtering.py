"""The guided particle filter (smle.filter_factor(method="particles")) and the models' conditional
CDFs (the exact route of filter_factor is tested in test_filtering_exact.py).

Outside references: the Kalman filter (Kalman 1960; smle.reference, itself checked against
statsmodels on the Nile data) for ar1-noise; the deterministic grid filter (Kitagawa 1987) and
EIS for sv; SciPy's normal and Student-t CDFs for every model's obs_cdf; the uniformity of PITs
under a correctly specified model (Rosenblatt 1952; Diebold, Gunther and Tay 1998).
"""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import stats

import smle
from smle.diagnostics.filtering import has_obs_cdf

from conftest import JPR_DESIGNS

PERCENT_DESIGN = {**JPR_DESIGNS["phi=0.95"], "mu": JPR_DESIGNS["phi=0.95"]["mu"] + 2 * np.log(100)}
AR1_NOISE = dict(mu=0.5, phi=0.9, sigma_eta=0.4, sigma_eps=0.6)


# ---------------------------------------------------------------------------------------------
# obs_cdf of every model against SciPy


def _cdf(model, params, y, x):
    params = {k: jnp.asarray(v, float) for k, v in params.items()}
    data = model.prepare(params, jnp.asarray(y))
    return np.asarray(model.obs_cdf(params, data, jnp.asarray(x)))


def test_every_registered_model_has_a_conditional_cdf():
    # a model without a latent state (garch) has no CDF given a state: it has the exact
    # one-step predictive CDF instead (checked against SciPy in tests/test_model_garch.py), and
    # filter_factor / diagnose turn it away with a message pointing there
    for name in smle.model_names():
        model = smle.get_model(name)
        if model.state_dim == 0:
            assert callable(getattr(model, "predictive_cdf", None)), name
            with pytest.raises(smle.SmleInputError, match="no latent state to filter.*predictive_cdf"):
                smle.filter_factor(model, model.start_params(np.linspace(-1, 1, 50)), np.linspace(-1, 1, 50))
        else:
            assert has_obs_cdf(model), name


@pytest.mark.parametrize("name, params", [
    ("sv", PERCENT_DESIGN),
    ("sv-t", {**PERCENT_DESIGN, "nu": 5.0}),
    ("ar1-noise", AR1_NOISE),
    ("local-level", dict(sigma_eta=0.3, sigma_eps=0.8)),
])
def test_univariate_cdfs_equal_scipy(name, params):
    model = smle.get_model(name)
    y, _ = smle.simulate(name, params, 40, seed=4)
    x = np.stack([np.linspace(-1, 3, 40), np.linspace(2, 0, 40), np.full(40, 1.2)], axis=1)
    got = _cdf(model, params, y, x)
    if name == "sv":
        expected = stats.norm.cdf(y[:, None], scale=np.exp(x / 2))
    elif name == "sv-t":
        nu = params["nu"]
        expected = stats.t.cdf(y[:, None], nu, scale=np.exp(x / 2) * np.sqrt((nu - 2) / nu))
    else:
        expected = stats.norm.cdf(y[:, None], loc=x, scale=params["sigma_eps"])
    assert got.shape == (40, 3)
    np.testing.assert_allclose(got, expected, rtol=1e-10, atol=1e-14)


def test_realized_sv_cdfs_equal_scipy():
    params = {**PERCENT_DESIGN, "xi": -0.3, "sigma_u": 0.4}
    model = smle.get_model("realized-sv")
    y, _ = smle.simulate("realized-sv", params, 40, seed=5)
    x = np.stack([np.linspace(0, 3, 40), np.full(40, 1.5)], axis=1)
    got = _cdf(model, params, y, x)
    assert got.shape == (40, 2, 2)
    np.testing.assert_allclose(got[..., 0], stats.norm.cdf(y[:, :1], scale=np.exp(x / 2)), rtol=1e-10, atol=1e-14)
    expected = stats.lognorm.cdf(y[:, 1:], s=0.4, scale=np.exp(-0.3 + x))  # log RM ~ N(xi + x, sigma_u^2)
    np.testing.assert_allclose(got[..., 1], expected, rtol=1e-10, atol=1e-14)


@pytest.mark.parametrize("options, extra", [
    (dict(link="ig"), {"lambda": 2.5}),
    (dict(link="lognormal", realized=True), {"s": 0.6, "xi": -0.2, "sigma_u": 0.3}),
])
def test_garch_mix_cdfs_equal_scipy(options, extra):
    """Given W_t the return is normal with mean m_t + sqrt(h_t) gamma (W_t - 1) / c and standard
    deviation sqrt(h_t W_t) / c; the realized measure is log-normal given W_t."""
    model = smle.get_model("garch-mix", **options)
    params = dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.08, beta=0.9, gamma=-0.3, rho=0.6, **extra)
    y, _ = smle.simulate(model, params, 40, seed=6)
    x = np.stack([np.linspace(-2.5, 2.5, 40), np.full(40, 0.3)], axis=1)
    got = _cdf(model, params, y, x)
    pj = {k: jnp.asarray(v, float) for k, v in params.items()}
    returns = y[:, 0] if model.realized else y
    residual, variance = (np.asarray(a) for a in model.garch_path(pj, jnp.asarray(returns)))
    w = np.asarray(model.mixing_exact(pj, jnp.asarray(x)))
    c = np.sqrt(1 + params["gamma"] ** 2 * float(model.mixing_variance(pj)))
    sd = np.sqrt(variance)[:, None]
    expected = stats.norm.cdf(residual[:, None], loc=sd * params["gamma"] * (w - 1) / c, scale=sd * np.sqrt(w) / c)
    returns_cdf = got[..., 0] if model.realized else got
    # the ig link uses the interpolant of log W, within 1e-7 of the exact one (test_model_garch_mix)
    np.testing.assert_allclose(returns_cdf, expected, atol=1e-7)
    if model.realized:
        expected = stats.lognorm.cdf(y[:, 1:], s=params["sigma_u"], scale=np.exp(params["xi"] + np.log(variance[:, None] * w)))
        np.testing.assert_allclose(got[..., 1], expected, atol=1e-10)


# ---------------------------------------------------------------------------------------------
# The filter against exact references


@pytest.fixture(scope="module")
def ar1_data():
    y, x = smle.simulate("ar1-noise", AR1_NOISE, 500, seed=1)
    model = smle.get_model("ar1-noise")
    kalman = smle.reference.kalman_filter(y, model.latent({k: jnp.asarray(v) for k, v in AR1_NOISE.items()}),
                                          AR1_NOISE["sigma_eps"] ** 2)
    return y, kalman


def test_filter_matches_the_kalman_filter_on_ar1_noise(ar1_data):
    """Filtered means and the log-likelihood against the exact Kalman filter. Measured over 30
    seeds (T = 500, 2000 particles): sd of the filter's log-likelihood 0.30, its mean 0.09 below
    the Kalman value (the downward bias of the log of an unbiased estimate, ~sd^2/2, plus noise).
    Tolerances: 4 sd for one run and for the mean of 6 runs."""
    y, kalman = ar1_data
    runs = [smle.filter_factor("ar1-noise", AR1_NOISE, y, n_particles=2000, seed=s, method="particles")
            for s in range(6)]
    exact = float(kalman.loglik)
    assert abs(runs[0].loglik - exact) < 4 * 0.30
    assert abs(np.mean([r.loglik for r in runs]) - exact) < 4 * 0.30 / np.sqrt(6) + 0.05
    # filtered mean: Monte Carlo error about sqrt(P_t / ESS_t); allow 5 of those at any period
    # (measured over 5 seeds: at most 3.8)
    mean_error = runs[0].filtered_mean - np.asarray(kalman.filtered_mean)
    filtered_sd = np.sqrt(np.asarray(kalman.filtered_var))
    assert np.max(np.abs(mean_error) / (filtered_sd / np.sqrt(runs[0].ess))) < 5.0
    # the 5% and 95% quantiles: the Gaussian ones, within a tenth of the filtered sd on average
    # (measured: 0.05, the quantile's Monte Carlo error at the ESS reached)
    for band, z in ((runs[0].filtered_lower, -1.6449), (runs[0].filtered_upper, 1.6449)):
        expected = np.asarray(kalman.filtered_mean) + z * filtered_sd
        assert np.mean(np.abs(band - expected) / filtered_sd) < 0.1
    # the predictive densities are the Kalman filter's, period by period (measured over 5 seeds:
    # mean absolute error of the log density 0.010, largest 0.16)
    innovations, variances = np.asarray(kalman.innovation), np.asarray(kalman.innovation_var)
    exact_terms = stats.norm.logpdf(innovations, scale=np.sqrt(variances))
    error = np.abs(runs[0].log_predictive - exact_terms)
    assert np.mean(error) < 0.02 and np.max(error) < 0.3
    # PITs: the Gaussian predictive CDF, within the filter's Monte Carlo error (sd <= 1/(2 sqrt(ESS)))
    exact_pit = stats.norm.cdf(innovations / np.sqrt(variances))
    assert np.max(np.abs(runs[0].pit[:, 0] - exact_pit)) < 5 * 0.5 / np.sqrt(runs[0].ess.min())


@pytest.fixture(scope="module")
def sv_data():
    y, x = smle.simulate("sv", PERCENT_DESIGN, 500, seed=12)
    return y, x


def test_filter_loglik_agrees_with_eis_and_the_grid_filter(sv_data):
    """Summed predictive log-densities against EIS within their combined NSE, and against the
    grid filter. The filter's NSE is measured here over 8 seeds (T = 500, 2000 particles; over
    30 seeds when this test was written: 0.24, mean 0.05 below the grid value); EIS's from its
    own weights (smle.loglik, 0.057). Tolerance: 4
    combined standard errors of the difference of the means."""
    y, _ = sv_data
    values = np.array([smle.filter_factor("sv", PERCENT_DESIGN, y, n_particles=2000, seed=s, method="particles").loglik
                       for s in range(8)])
    pf_nse = values.std(ddof=1)
    assert 0 < pf_nse < 1.0
    eis = smle.loglik("sv", PERCENT_DESIGN, y, n_draws=64, seed=0, method="eis")
    combined = np.sqrt(pf_nse**2 / len(values) + eis.nse**2)
    assert abs(values.mean() - eis.value) < 4 * combined
    grid = smle.reference.grid_loglik("sv", PERCENT_DESIGN, y)
    assert abs(values.mean() - grid) < 4 * pf_nse / np.sqrt(len(values)) + 0.05


def test_filter_is_reproducible_and_causal(sv_data):
    """Same seed, same output; the output at t does not use observations after t."""
    y, x = sv_data
    first = smle.filter_factor("sv", PERCENT_DESIGN, y, n_particles=2000, seed=3, method="particles")
    again = smle.filter_factor("sv", PERCENT_DESIGN, y, n_particles=2000, seed=3, method="particles")
    np.testing.assert_array_equal(first.filtered_mean, again.filtered_mean)
    changed = y.copy()
    changed[300:] *= 3.0
    other = smle.filter_factor("sv", PERCENT_DESIGN, changed, n_particles=2000, seed=3, method="particles")
    np.testing.assert_array_equal(other.filtered_mean[:300], first.filtered_mean[:300])
    np.testing.assert_array_equal(other.pit[:300], first.pit[:300])
    assert not np.allclose(other.filtered_mean[300:], first.filtered_mean[300:])
    # the filtered band covers the true log variance about 90% of the time
    coverage = np.mean((first.filtered_lower <= x) & (x <= first.filtered_upper))
    assert 0.85 < coverage < 0.95


def test_pits_are_uniform_under_the_true_model():
    """60 samples of sv (T = 500) filtered exactly (filter_factor's default route; the particle
    filter's PITs are checked against these in test_filtering_exact.py) at the true parameters: the
    Kolmogorov-Smirnov, Berkowitz and Ljung-Box tests (and the tail rule: Jarque-Bera or the 1%
    tails LR) reject at 5% about as often as they should. Rejection counts of a 5% test are
    Binomial(60, 0.05) (mean 3); they stay below 8 with probability 0.990. The tail rule has size
    at most 10%: Binomial(60, 0.10) stays below 13 with probability 0.995. Measured over 200 other
    samples (seeds 5000-5199), exact PITs: KS 5.5%, Berkowitz 7.0%, Jarque-Bera 6.5%, 1% tails LR
    4.5%, tail rule 9.0%, Ljung-Box 3.5% (with the particle filter, when this test used it: 5.5%,
    7.0%, 7.0%, 4.5%, 9.5%)."""
    from smle.diagnostics import gof

    model = smle.get_model("sv")
    counts = {"ks": 0, "berkowitz": 0, "tails": 0, "ljung-box": 0}
    for sample in range(60):
        y, _ = smle.simulate(model, PERCENT_DESIGN, 500, seed=1000 + sample)
        result = smle.filter_factor(model, PERCENT_DESIGN, y)
        assert result.method == "exact"
        pit = result.pit[:, 0]
        z = gof.normal_scores(pit)
        counts["ks"] += stats.kstest(pit, "uniform").pvalue < 0.05
        counts["berkowitz"] += gof.berkowitz_test(z)["p_value"] < 0.05
        counts["tails"] += (stats.jarque_bera(z).pvalue < 0.05) or (gof.tail_test(z, 0.01)["p_value"] < 0.05)
        counts["ljung-box"] += gof.ljung_box(z, [10])[1][0] < 0.05
    assert counts["ks"] <= 7 and counts["berkowitz"] <= 7 and counts["ljung-box"] <= 7, counts
    assert counts["tails"] <= 12, counts
    # and they do reject sometimes: a test that never rejects could not fail the line above
    assert counts["ks"] + counts["berkowitz"] + counts["ljung-box"] >= 3, counts


@pytest.mark.parametrize("method", ["particles", "exact"])
@pytest.mark.parametrize("name, options, params", [
    ("realized-sv", {}, {**PERCENT_DESIGN, "xi": -0.3, "sigma_u": 0.4}),
    ("garch-mix", {"link": "ig"}, dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.08, beta=0.9, gamma=-0.3,
                                       rho=0.8, **{"lambda": 1.5})),
])
def test_multi_series_and_garch_mix_pits_are_uniform_under_the_true_model(name, options, params, method):
    """PITs of every series at the true parameters pass the Kolmogorov-Smirnov test at 0.1%, by the
    particle filter and by the exact grid filter (one PIT per series from the 3-d CDF on the grid)."""
    model = smle.get_model(name, **options)
    y, x = smle.simulate(model, params, 500, seed=21)
    result = smle.filter_factor(model, params, y, n_particles=2000, seed=0, method=method)
    assert result.method == method
    assert result.pit.shape == (500, model.n_series)
    for k in range(model.n_series):
        assert stats.kstest(result.pit[:, k], "uniform").pvalue > 1e-3, k
    assert np.corrcoef(result.filtered_mean, x)[0, 1] > 0.5


def test_bad_input_to_the_filter(sv_data):
    y, _ = sv_data
    with pytest.raises(smle.SmleInputError, match="n_particles = 10 is not accepted"):
        smle.filter_factor("sv", PERCENT_DESIGN, y, n_particles=10)
    with pytest.raises(smle.SmleInputError, match="n_particles = 2000.0 is not accepted"):
        smle.filter_factor("sv", PERCENT_DESIGN, y, n_particles=2000.0)
    with pytest.raises(smle.SmleInputError, match="resample_threshold = 0 is not accepted"):
        smle.filter_factor("sv", PERCENT_DESIGN, y, resample_threshold=0)
    with pytest.raises(smle.SmleInputError, match=r"y has shape \(500, 2\)"):
        smle.filter_factor("sv", PERCENT_DESIGN, np.column_stack([y, y]))
    with pytest.raises(smle.SmleInputError, match="nu"):  # the parameters of another model
        smle.filter_factor("sv-t", PERCENT_DESIGN, y)
    with pytest.raises(smle.SmleInputError, match="seed"):
        smle.filter_factor("sv", PERCENT_DESIGN, y, seed=-1)
    with pytest.raises(smle.SmleInputError, match="non-finite"):
        smle.filter_factor("sv", PERCENT_DESIGN, np.where(np.arange(500) == 7, np.nan, y))
    assert isinstance(jax.random.PRNGKey(0), jax.Array)  # keys are accepted as seeds too
    keyed = smle.filter_factor("sv", PERCENT_DESIGN, y, seed=jax.random.PRNGKey(3), method="particles")
    np.testing.assert_array_equal(keyed.filtered_mean,
                                  smle.filter_factor("sv", PERCENT_DESIGN, y, seed=3, method="particles").filtered_mean)
    with pytest.raises(smle.SmleInputError, match="method = 'eis' is not accepted; accepted: 'auto', 'exact' or "
                                                  "'particles'"):
        smle.filter_factor("sv", PERCENT_DESIGN, y, method="eis")
    with pytest.raises(smle.SmleInputError, match="exact_tol = 0 is not accepted"):
        smle.filter_factor("sv", PERCENT_DESIGN, y, exact_tol=0)
