"""The `realized-sv` model: returns and a log realized measure with a bias (Takahashi, Omori and
Watanabe 2009, CSDA 53)."""

import math

import jax.numpy as jnp
import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy import integrate, stats

import smle
from smle.errors import SmleInputError
from smle.models import get_model
from smle.models.realized_sv import observations

from _model_checks import N_DRAWS, assert_eis_matches, assert_eis_matches_grid, binomial_bound, coverage_misses, eis_across_seeds

DESIGN = dict(mu=0.0, phi=0.97, sigma_eta=0.2, xi=-0.3, sigma_u=0.4)


@pytest.fixture(scope="module")
def data500():
    y, _ = smle.simulate("realized-sv", DESIGN, 500, seed=12)
    return y


def test_simulated_measure_has_the_stated_bias_and_noise():
    # log RM - x = xi + u: sample mean and sd against xi and sigma_u (Monte Carlo bands of 4 SE)
    y, x = smle.simulate("realized-sv", DESIGN, 20000, seed=5)
    residual = np.log(y[:, 1]) - x
    assert abs(residual.mean() - DESIGN["xi"]) < 4 * DESIGN["sigma_u"] / np.sqrt(residual.size)
    assert abs(residual.std() / DESIGN["sigma_u"] - 1) < 4 / np.sqrt(2 * residual.size)


def test_eis_agrees_with_grid_filter(data500):
    nse, _ = assert_eis_matches_grid("realized-sv", DESIGN, data500)
    assert nse < 0.01  # the measurement equation is Gaussian in x: measured about 7e-4


def test_independent_case_against_quad_and_eis(data500):
    # per period: integral of N(x; mu, sigma_eta^2) N(r; 0, e^x) N(log RM; xi + x, sigma_u^2) / RM
    # by scipy.integrate.quad, densities from scipy.stats
    params = {**DESIGN, "phi": 0.0}
    sd, mu, xi, su = params["sigma_eta"], params["mu"], params["xi"], params["sigma_u"]
    normal = lambda v, m, s: math.exp(-0.5 * ((v - m) / s) ** 2) / (s * math.sqrt(2 * math.pi))
    assert abs(normal(0.3, 0.1, 0.7) - stats.norm.pdf(0.3, 0.1, 0.7)) < 1e-15  # scalar form vs scipy

    def period(r, rm):
        f = lambda x: normal(x, mu, sd) * normal(r, 0.0, math.exp(x / 2)) * normal(math.log(rm), xi + x, su) / rm
        centre = math.log(rm) - xi
        lo, hi = min(centre, mu) - 10 * sd, max(centre, mu) + 10 * sd
        return math.log(integrate.quad(f, lo, hi, points=[centre, mu], epsabs=0, epsrel=1e-10, limit=200)[0])

    model = get_model("realized-sv")
    as_jax = {k: jnp.asarray(v) for k, v in params.items()}
    exact = sum(period(r, rm) for r, rm in data500[:100])
    assert abs(float(model.independent_loglik(as_jax, jnp.asarray(data500[:100]))) - exact) < 1e-7
    exact = float(model.independent_loglik(as_jax, jnp.asarray(data500)))
    values, _ = eis_across_seeds("realized-sv", params, data500)
    assert_eis_matches(values, exact)


def test_fit_recovers_parameters_with_calibrated_intervals():
    fits = []
    for rep in range(3):
        y, _ = smle.simulate("realized-sv", DESIGN, 2000, seed=300 + rep)
        fit = smle.fit("realized-sv", y, n_draws=N_DRAWS, seed=rep, method="eis", exact_reference=False)
        assert fit.converged, fit.message
        fits.append(fit)
    misses, total = coverage_misses(fits, DESIGN)
    assert misses <= binomial_bound(total), (misses, total, [f.params for f in fits])


@pytest.mark.parametrize("bad, label", [(0.0, "zero"), (-0.5, "negative")])
def test_non_positive_measures_are_refused_naming_rows(data500, bad, label):
    y = data500.copy()
    y[[3, 17], 1] = bad
    with pytest.raises(SmleInputError, match=r"realized measure.*row\(s\) 3, 17.*positive"):
        smle.loglik("realized-sv", DESIGN, y)


def test_missing_measures_are_refused_naming_rows(data500):
    y = data500.copy()
    y[42, 1] = np.nan
    with pytest.raises(SmleInputError, match=r"non-finite.*row\(s\) 42"):
        smle.loglik("realized-sv", DESIGN, y)


def test_mismatched_lengths_are_refused(data500):
    with pytest.raises(SmleInputError, match="returns has 500 periods but realized_measure has 499"):
        observations(data500[:, 0], data500[:-1, 1])
    with pytest.raises(SmleInputError):  # a ragged pair handed to loglik directly
        smle.loglik("realized-sv", DESIGN, [data500[:, 0], data500[:-1, 1]])
    with pytest.raises(SmleInputError, match=r"expects shape \(T, 2\)"):
        smle.loglik("realized-sv", DESIGN, data500[:, 0])
    assert np.array_equal(observations(data500[:, 0], data500[:, 1]), data500)


def test_zero_returns_are_ordinary(data500):
    y = data500.copy()
    y[::5, 0] = 0.0
    assert np.isfinite(smle.loglik("realized-sv", DESIGN, y, n_draws=N_DRAWS, seed=1, method="eis").value)


@settings(max_examples=15, deadline=None, derandomize=True)  # the same examples every run: CI is never flaky
@given(
    mu=st.floats(-3, 3), phi=st.floats(-0.9, 0.995), sigma_eta=st.floats(0.02, 1.5),
    xi=st.floats(-2, 2), sigma_u=st.floats(0.05, 2.0),
)
def test_no_nan_over_the_admissible_region(data500, mu, phi, sigma_eta, xi, sigma_u):
    params = dict(mu=mu, phi=phi, sigma_eta=sigma_eta, xi=xi, sigma_u=sigma_u)
    assert np.isfinite(smle.loglik("realized-sv", params, data500, n_draws=N_DRAWS, seed=0, method="eis").value)
