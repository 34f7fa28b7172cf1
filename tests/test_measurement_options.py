"""The measurement equation of the second series as a model option (``measurement`` of
``realized-sv`` and ``garch-mix``): gamma realized variance and log range (Alizadeh, Brandt and
Diebold 2002, J. Finance 57), checked against SciPy densities and CDFs, and the EIS likelihood
against the exact grid filter (smle.reference) within measured NSEs."""

import jax.numpy as jnp
import numpy as np
import pytest
from scipy import stats

import smle
from smle.errors import SmleInputError
from smle.models.measurements import LOG_RANGE_MEAN, range_from_parkinson

from _model_checks import assert_eis_matches_grid

STATE = dict(mu=0.0, phi=0.97, sigma_eta=0.2)
DESIGNS = {"gamma": {**STATE, "xi": 0.8}, "log-range": {**STATE, "xi": -0.1, "sigma_u": 0.3}}
MIX = dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.06, beta=0.90, gamma=-0.4, rho=0.9, **{"lambda": 1.5})
M = 40


def _models(measurement):
    return (smle.get_model("realized-sv", measurement=measurement, n_intraday=M),
            smle.get_model("garch-mix", realized=True, measurement=measurement, n_intraday=M))


@pytest.mark.parametrize("measurement", ["gamma", "log-range"])
def test_measurement_densities_and_cdfs_against_scipy(measurement):
    sv, mix = _models(measurement)
    params = DESIGNS[measurement]
    y, _ = smle.simulate(sv, params, 40, seed=3)
    x = np.stack([np.linspace(-1, 1, 40), np.full(40, 0.4)], axis=1)
    jp = {k: jnp.asarray(v) for k, v in params.items()}
    data = sv.prepare(jp, jnp.asarray(y))
    got = np.asarray(sv.log_obs_density(jp, data, jnp.asarray(x)))
    level = y[:, 1:]
    if measurement == "gamma":  # RV | x ~ Gamma(M/2, scale 2 xi e^x / M)
        law = stats.gamma(M / 2, scale=2 * params["xi"] * np.exp(x) / M)
        second = law.logpdf(level)
    else:  # log range | x ~ N(x/2 + E log R + xi, sigma_u^2), density of the range in levels
        law = stats.norm(0.5 * x + LOG_RANGE_MEAN + params["xi"], params["sigma_u"])
        second = law.logpdf(np.log(level)) - np.log(level)
    expected = stats.norm.logpdf(y[:, :1], scale=np.exp(x / 2)) + second
    np.testing.assert_allclose(got, expected, rtol=1e-10, atol=1e-10)
    cdf = np.asarray(sv.obs_cdf(jp, data, jnp.asarray(x)))[..., 1]
    np.testing.assert_allclose(cdf, law.cdf(level if measurement == "gamma" else np.log(level)), atol=1e-10)
    # garch-mix: the same equation with the day's variance h_t W_t
    mp = {**MIX, **{k: v for k, v in params.items() if k in ("xi", "sigma_u")}}
    jm = {k: jnp.asarray(v) for k, v in mp.items()}
    y_mix, _ = smle.simulate(mix, mp, 40, seed=4)
    prepared = mix.prepare(jm, jnp.asarray(y_mix))
    log_w = np.asarray(mix.log_mixing(jm, prepared, jnp.asarray(x)))
    log_day = np.log(np.asarray(prepared.variance))[:, None] + log_w
    one_series = smle.get_model("garch-mix")
    return_part = np.asarray(one_series.log_obs_density(jm, one_series.prepare(jm, jnp.asarray(y_mix[:, 0])),
                                                        jnp.asarray(x)))
    level = y_mix[:, 1:]
    if measurement == "gamma":
        second = stats.gamma.logpdf(level, M / 2, scale=2 * mp["xi"] * np.exp(log_day) / M)
    else:
        second = stats.norm.logpdf(np.log(level), 0.5 * log_day + LOG_RANGE_MEAN + mp["xi"], mp["sigma_u"]) \
            - np.log(level)
    np.testing.assert_allclose(np.asarray(mix.log_obs_density(jm, prepared, jnp.asarray(x))), return_part + second,
                               rtol=1e-9, atol=1e-9)


@pytest.mark.parametrize("measurement", ["gamma", "log-range"])
def test_eis_agrees_with_grid_filter(measurement):
    # realized-sv with the measurement, T = 500: 20 EIS seeds of 64 draws against the grid
    # filter (1000 nodes); measured NSE about 1e-3 for both
    sv, _ = _models(measurement)
    y, _ = smle.simulate(sv, DESIGNS[measurement], 500, seed=12)
    nse, _ = assert_eis_matches_grid(sv, DESIGNS[measurement], y)
    assert nse < 0.05


def test_simulated_measurements_follow_their_laws():
    # 20000 seeded days: RV / (xi e^x) has mean 1 and variance 2 / M; log range - x/2 has mean
    # E log R + xi and sd sigma_u. Tolerances 4 standard errors.
    n = 20000
    sv, _ = _models("gamma")
    y, x = smle.simulate(sv, DESIGNS["gamma"], n, seed=5)
    ratio = y[:, 1] / (DESIGNS["gamma"]["xi"] * np.exp(x))
    assert abs(ratio.mean() - 1) < 4 * np.sqrt(2 / M / n)
    assert abs(ratio.var() / (2 / M) - 1) < 4 * np.sqrt(2 / n) * 1.5  # gamma kurtosis 3 + 12/M
    sv, _ = _models("log-range")
    y, x = smle.simulate(sv, DESIGNS["log-range"], n, seed=6)
    residual = np.log(y[:, 1]) - 0.5 * x
    assert abs(residual.mean() - LOG_RANGE_MEAN - DESIGNS["log-range"]["xi"]) < 4 * 0.3 / np.sqrt(n)
    assert abs(residual.std() / 0.3 - 1) < 4 / np.sqrt(2 * n)


def test_range_from_the_prepared_table():
    # smle prepare's parkinson_pct2 = (100 (ln H - ln L))^2 / (4 ln 2): the range in percent back
    high, low = np.array([101.0, 55.0]), np.array([99.0, 54.0])
    parkinson = (100 * np.log(high / low)) ** 2 / (4 * np.log(2))
    np.testing.assert_allclose(range_from_parkinson(parkinson), 100 * np.log(high / low), rtol=1e-14)


def test_bad_measurement_options():
    with pytest.raises(SmleInputError, match="measurement = 'range'.*'lognormal', 'gamma', 'log-range'"):
        smle.get_model("realized-sv", measurement="range")
    with pytest.raises(SmleInputError, match="n_intraday = 0"):
        smle.get_model("garch-mix", realized=True, measurement="gamma", n_intraday=0)
    assert smle.get_model("realized-sv", measurement="gamma").param_names == ("mu", "phi", "sigma_eta", "xi")
    assert smle.get_model("garch-mix", realized=True, measurement="log-range").series_labels[1] == "high-low range"
    with pytest.raises(SmleInputError, match=r"params\['xi'\] = -0.5 .*xi > 0"):
        smle.loglik(smle.get_model("realized-sv", measurement="gamma"), {**STATE, "xi": -0.5},
                    np.column_stack([np.ones(20), np.ones(20)]))
