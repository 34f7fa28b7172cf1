"""The Gaussian-kernel algebra of EIS against numerical integration (SciPy's quad)."""

import numpy as np
import pytest
from scipy import integrate, stats

import smle  # noqa: F401
from smle.engine import gaussian
from smle.engine import latent


def _kernel(x, b, c, d, phi, v, x_prev):
    return stats.norm.pdf(x, d + phi * x_prev, np.sqrt(v)) * np.exp(b * x - 0.5 * c * x * x)


@pytest.mark.parametrize("case", range(12))
def test_integrating_constant_and_sampler_moments_match_quadrature(case):
    rng = np.random.default_rng(case)
    b, d, x_prev = rng.normal(0, 1.5, 3)
    v = rng.uniform(0.05, 2.0)
    c = rng.uniform(-0.5 / v, 3.0)  # negative curvature allowed while 1/v + c > 0
    phi = rng.uniform(-0.99, 0.99)
    chi = gaussian.kernel_integral(b, c, d, phi, v)
    moments = gaussian.sampler_moments(b, c, d, phi, v)
    mean = float(moments.mean_intercept + moments.mean_slope * x_prev)
    sd = float(1 / np.sqrt(moments.precision))
    lo, hi = mean - 12 * sd, mean + 12 * sd
    kwargs = dict(args=(b, c, d, phi, v, x_prev), epsabs=0, epsrel=1e-12, limit=200)
    total, _ = integrate.quad(_kernel, lo, hi, **kwargs)
    log_chi = float(chi.alpha + chi.beta * x_prev - 0.5 * chi.gamma * x_prev**2)
    assert log_chi == pytest.approx(np.log(total), abs=1e-10)
    first, _ = integrate.quad(lambda x, *a: x * _kernel(x, *a), lo, hi, **kwargs)
    second, _ = integrate.quad(lambda x, *a: (x - mean) ** 2 * _kernel(x, *a), lo, hi, **kwargs)
    assert first / total == pytest.approx(mean, abs=1e-9)
    assert second / total == pytest.approx(sd**2, rel=1e-9)


def test_standardised_state_has_unit_variance_and_given_autocorrelation():
    # stationary AR(1) moments (any time-series text, e.g. Hamilton 1994, section 3.4)
    import jax

    state = latent.standardised(0.7)
    path = np.asarray(latent.sample_path(state, jax.random.PRNGKey(5), 200_000))
    # Monte Carlo SE of the variance with rho = 0.7: about sqrt(2 (1 + rho^2)/(1 - rho^2) / n) = 0.0054
    assert np.var(path) == pytest.approx(1.0, abs=4 * 0.0054)
    # SE of the lag-1 autocorrelation about sqrt((1 - rho^2) / n) = 0.0016
    assert np.corrcoef(path[1:], path[:-1])[0, 1] == pytest.approx(0.7, abs=4 * 0.0016)
