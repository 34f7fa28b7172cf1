"""Measurement densities of a second series given the day's log variance (smle.models.measurements)."""

import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import integrate, stats

from smle.models import measurements as M

H = np.array([-1.3, 0.0, 0.4, 2.2])  # log variances


def test_gamma_density_equals_scipy():
    # RV | h ~ Gamma(shape M/2, scale 2 xi exp(h) / M): scipy.stats.gamma(a, scale)
    rv = np.array([0.05, 0.9, 1.7, 12.0])
    for n_intraday, xi in ((78, 0.8), (5, 1.3), (288, 1.0)):
        expected = stats.gamma(n_intraday / 2, scale=2 * xi * np.exp(H) / n_intraday).logpdf(rv)
        got = M.gamma_measure_log_density(jnp.asarray(rv), jnp.asarray(H), xi, n_intraday)
        np.testing.assert_allclose(got, expected, rtol=1e-12, atol=1e-11)
    # broadcasting (T, 1) measurements against (T, S) paths, as a model does
    paths = jnp.asarray(H)[:, None] + jnp.array([0.0, 0.5, -0.5])
    got = M.gamma_measure_log_density(jnp.asarray(rv)[:, None], paths, 1.0, 78)
    assert got.shape == (4, 3)
    np.testing.assert_allclose(got[:, 1], stats.gamma(39, scale=2 * np.exp(H + 0.5) / 78).logpdf(rv), rtol=1e-12)


def test_gamma_law_is_exact_for_gaussian_intraday_returns():
    # the sum of squares of M independent N(0, xi exp(h) / M) intraday returns, seeded draws,
    # against the Gamma CDF (Kolmogorov-Smirnov; the test rejects a wrong shape or scale, e.g.
    # shape M instead of M/2, with p < 1e-100 at this sample size)
    rng = np.random.default_rng(5)
    n_intraday, xi, h = 39, 0.9, 0.4
    rv = np.sum(rng.normal(0.0, math.sqrt(xi * math.exp(h) / n_intraday), (20000, n_intraday)) ** 2, axis=1)
    law = stats.gamma(n_intraday / 2, scale=2 * xi * math.exp(h) / n_intraday)
    assert stats.kstest(rv, law.cdf).pvalue > 0.001
    assert stats.kstest(rv, stats.gamma(n_intraday, scale=xi * math.exp(h) / n_intraday).cdf).pvalue < 1e-10
    # and the module's density is that law's
    grid = np.linspace(0.3, 3.0, 7)
    np.testing.assert_allclose(M.gamma_measure_log_density(grid, h, xi, n_intraday), law.logpdf(grid), rtol=1e-12)


def test_log_normal_measure_equals_scipy():
    # log RM ~ N(xi + h, sigma_u^2): RM is scipy.stats.lognorm(s = sigma_u, scale = exp(xi + h))
    rm = np.array([0.2, 1.1, 2.5, 30.0])
    expected = stats.lognorm(0.45, scale=np.exp(-0.2 + H)).logpdf(rm)
    np.testing.assert_allclose(M.log_normal_measure_log_density(rm, H, -0.2, 0.45), expected, rtol=1e-12)


def test_log_range_density_equals_scipy_normal():
    log_range = np.array([-1.0, 0.2, 0.7, 1.9])
    mean = 0.5 * H + M.LOG_RANGE_MEAN - 0.1
    expected = stats.norm(mean, math.sqrt(M.LOG_RANGE_VARIANCE)).logpdf(log_range)
    np.testing.assert_allclose(M.log_range_log_density(log_range, H, bias=-0.1), expected, rtol=1e-12)
    grad = jax.grad(lambda h: M.log_range_log_density(0.3, h))(0.1)
    assert float(grad) == pytest.approx(0.5 * (0.3 - 0.05 - M.LOG_RANGE_MEAN) / M.LOG_RANGE_VARIANCE, rel=1e-12)


def test_range_density_has_fellers_moments():
    # Feller (1951, Ann. Math. Statistics 22): the range of a standard Brownian motion on [0, 1]
    # has E[R] = 2 sqrt(2 / pi) and E[R^2] = 4 log 2; the density integrates to one. SciPy's quad
    # over the module's density (both series, switching at r = 1.3).
    def moment(k):
        return integrate.quad(lambda r: r**k * M.brownian_range_density(r), 0.0, 15.0, points=[1.3],
                              epsabs=1e-13, epsrel=1e-12, limit=200)[0]

    assert moment(0) == pytest.approx(1.0, abs=1e-11)
    assert moment(1) == pytest.approx(2 * math.sqrt(2 / math.pi), abs=1e-11)
    assert moment(2) == pytest.approx(4 * math.log(2), abs=1e-11)
    # the two series agree where they meet
    r = np.array([1.0, 1.3, 1.6])
    k = np.arange(1, 60)[:, None]
    feller = 8 * np.sum((-1.0) ** (k - 1) * k**2 * stats.norm.pdf(k * r), axis=0)
    np.testing.assert_allclose(M.brownian_range_density(r), feller, rtol=1e-13)
    # the log-range constants by SciPy's quad against the module's trapezoidal rule
    mean = integrate.quad(lambda r: math.log(r) * M.brownian_range_density(r), 0.0, 15.0, points=[1.3],
                          epsabs=1e-13, limit=200)[0]
    variance = integrate.quad(lambda r: (math.log(r) - mean) ** 2 * M.brownian_range_density(r), 0.0, 15.0,
                              points=[1.3], epsabs=1e-13, limit=200)[0]
    assert M.LOG_RANGE_MEAN == pytest.approx(mean, abs=1e-10)
    assert M.LOG_RANGE_VARIANCE == pytest.approx(variance, abs=1e-10)
    # Alizadeh, Brandt and Diebold (2002, J. Finance 57) quote 0.43 and 0.29^2 (recalled from memory)
    assert round(M.LOG_RANGE_MEAN, 2) == 0.43 and round(math.sqrt(M.LOG_RANGE_VARIANCE), 2) == 0.29


def test_log_range_constants_against_simulated_brownian_paths():
    # 40000 seeded Brownian paths on [0, 1] with 256 steps. The extremes of the discrete path miss
    # the excursions between grid points: the plain discrete log range has mean 0.375, 0.050
    # (35 standard errors) below the continuous value, and variance 0.090 (measured). Each step's maximum (minimum) is
    # therefore drawn exactly from the Brownian bridge between the two grid values,
    # M = (a + b + sqrt((b - a)^2 - 2 dt log U)) / 2; drawing the step's maximum and minimum
    # independently only matters when both extremes of the day fall in one step, which has
    # negligible probability with 256 steps. Tolerance: 4 Monte Carlo standard errors (measured
    # here from the sample: 0.0014 for the mean, 0.00055 for the variance; the simulated values
    # 0.42524 and 0.08188 are 0.3 and 0.6 standard errors from the constants).
    rng = np.random.default_rng(20260603)
    n_paths, n_steps = 40000, 256
    dt = 1.0 / n_steps
    log_range = []
    for _ in range(4):
        steps = rng.normal(0.0, math.sqrt(dt), (n_paths // 4, n_steps))
        path = np.concatenate([np.zeros((n_paths // 4, 1)), np.cumsum(steps, axis=1)], axis=1)
        a, b = path[:, :-1], path[:, 1:]
        spread_max = np.sqrt((b - a) ** 2 - 2 * dt * np.log(rng.uniform(size=a.shape)))
        spread_min = np.sqrt((b - a) ** 2 - 2 * dt * np.log(rng.uniform(size=a.shape)))
        high = np.max(0.5 * (a + b + spread_max), axis=1)
        low = np.min(0.5 * (a + b - spread_min), axis=1)
        log_range.append(np.log(high - low))
    log_range = np.concatenate(log_range)
    mean, variance = log_range.mean(), log_range.var()
    se_mean = log_range.std() / math.sqrt(n_paths)
    se_variance = math.sqrt(np.mean((log_range - mean) ** 4) - variance**2) / math.sqrt(n_paths)
    assert abs(mean - M.LOG_RANGE_MEAN) < 4 * se_mean, (mean, se_mean)
    assert abs(variance - M.LOG_RANGE_VARIANCE) < 4 * se_variance, (variance, se_variance)
