"""The `sv-t` model: SV with standardised Student-t errors (Harvey, Ruiz and Shephard 1994)."""

import math

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy import integrate, stats

import smle
from smle.errors import EISBreakdownError
from smle.errors import SmleInputError
from smle.models import get_model

from _model_checks import N_DRAWS, assert_eis_matches, assert_eis_matches_grid, binomial_bound, coverage_misses, eis_across_seeds

DESIGN = dict(mu=0.0, phi=0.95, sigma_eta=0.25, nu=8.0)


@pytest.fixture(scope="module")
def data500():
    y, _ = smle.simulate("sv-t", DESIGN, 500, seed=11)
    return y


def test_eis_agrees_with_grid_filter(data500):
    # grid filter of Kitagawa (1987); tolerance: 4 NSE measured over 20 seeds
    nse, _ = assert_eis_matches_grid("sv-t", DESIGN, data500)
    assert nse < 0.05  # measured about 0.013 at this design


def test_independent_case_against_quad_and_eis(data500):
    # per period integral of N(x; mu, sigma_eta^2) * t-density, by scipy.integrate.quad, with
    # the t density from scipy.stats (scale sqrt((nu-2)/nu) exp(x/2)), written independently
    params = {**DESIGN, "phi": 0.0}
    model = get_model("sv-t")
    nu, sd, mu = params["nu"], params["sigma_eta"], params["mu"]
    scale = math.sqrt((nu - 2) / nu)
    # scalar math for speed (scipy.stats calls inside quad cost ~50 us each); the t constant
    # and the normal density are checked once against scipy.stats
    log_t_const = math.lgamma((nu + 1) / 2) - math.lgamma(nu / 2) - 0.5 * math.log(nu * math.pi)
    assert abs(math.exp(log_t_const) - stats.t.pdf(0.0, nu)) < 1e-15

    def period(y):
        def f(x):
            s = scale * math.exp(x / 2)
            prior = math.exp(-0.5 * ((x - mu) / sd) ** 2) / (sd * math.sqrt(2 * math.pi))
            return prior * math.exp(log_t_const - 0.5 * (nu + 1) * math.log1p((y / s) ** 2 / nu)) / s
        return math.log(integrate.quad(f, mu - 12 * sd, mu + 12 * sd, epsabs=0, epsrel=1e-10, limit=200)[0])

    # the first 100 periods by quad; then EIS on all 500 against the (checked) quadrature
    import jax.numpy as jnp
    as_jax = {k: jnp.asarray(v) for k, v in params.items()}
    exact = sum(period(v) for v in data500[:100])
    assert abs(float(model.independent_loglik(as_jax, jnp.asarray(data500[:100]))) - exact) < 1e-7
    exact = float(model.independent_loglik(as_jax, jnp.asarray(data500)))
    values, _ = eis_across_seeds("sv-t", params, data500)
    assert_eis_matches(values, exact)


def test_large_nu_approaches_sv(data500):
    # the standardised t tends to the normal law: log L differs by O(T / nu)
    sv_params = {k: DESIGN[k] for k in ("mu", "phi", "sigma_eta")}
    a = smle.loglik("sv-t", {**sv_params, "nu": 1e7}, data500, n_draws=N_DRAWS, seed=3, method="eis").value
    b = smle.loglik("sv", sv_params, data500, n_draws=N_DRAWS, seed=3, method="eis").value
    assert abs(a - b) < 1e-3


def test_zero_returns_are_ordinary(data500):
    y = data500.copy()
    y[::5] = 0.0
    result = smle.loglik("sv-t", DESIGN, y, n_draws=N_DRAWS, seed=1, method="eis")
    assert np.isfinite(result.value)


def test_fit_recovers_parameters_with_calibrated_intervals():
    # 3 replications at T = 2000; miss count of the 12 intervals against a binomial bound
    fits = []
    for rep in range(3):
        y, _ = smle.simulate("sv-t", DESIGN, 2000, seed=200 + rep)
        fit = smle.fit("sv-t", y, n_draws=N_DRAWS, seed=rep, method="eis", exact_reference=False)
        assert fit.converged, fit.message
        fits.append(fit)
    misses, total = coverage_misses(fits, DESIGN)
    assert misses <= binomial_bound(total), (misses, total, [f.params for f in fits])


@pytest.mark.parametrize("nu", [2.0, 1.5, -3.0, np.inf])
def test_nu_at_or_beyond_the_edge_is_refused(data500, nu):
    with pytest.raises(SmleInputError, match=r"params\['nu'\].*nu > 2"):
        smle.loglik("sv-t", {**DESIGN, "nu": nu}, data500)


@settings(max_examples=15, deadline=None, derandomize=True)  # the same examples every run: CI is never flaky
@given(
    mu=st.floats(-3, 3), phi=st.floats(-0.9, 0.995), sigma_eta=st.floats(0.02, 1.5),
    nu=st.floats(2.05, 500.0),
)
def test_no_nan_over_the_admissible_region(data500, mu, phi, sigma_eta, nu):
    # a finite value, or the clear error of a breakdown that more draws could not repair (EIS cannot
    # fit where the state's innovation swamps one observation: sigma_eta above about 1.3); never a NaN
    try:
        value = smle.loglik("sv-t", dict(mu=mu, phi=phi, sigma_eta=sigma_eta, nu=nu), data500, n_draws=N_DRAWS,
                            seed=0, method="eis").value
    except EISBreakdownError as error:
        assert "cannot be trusted" in str(error) and sigma_eta > 1.0
        return
    assert np.isfinite(value)
