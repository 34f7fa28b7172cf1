"""Bad input gets a clear error that names the argument, the value and what is accepted."""

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

import smle
from smle import SmleInputError

SV = dict(mu=-1.0, phi=0.95, sigma_eta=0.2)


@pytest.fixture(scope="module")
def returns():
    y, _ = smle.simulate("sv", SV, 40, seed=0)
    return y


def test_non_finite_observations_are_named_by_row(returns):
    y = returns.copy()
    y[[3, 17]] = [np.nan, np.inf]
    with pytest.raises(SmleInputError, match=r"non-finite .* row\(s\) 3, 17"):
        smle.loglik("sv", SV, y, n_draws=4)


def test_too_short_a_series(returns):
    with pytest.raises(SmleInputError, match=r"y has 5 periods; model 'sv' needs at least 10"):
        smle.loglik("sv", SV, returns[:5], n_draws=4)


def test_wrong_dimensions(returns):
    with pytest.raises(SmleInputError, match=r"shape \(20, 2\); model 'sv' expects shape \(T,\)"):
        smle.loglik("sv", SV, returns.reshape(20, 2), n_draws=4)


def test_non_numeric_observations():
    with pytest.raises(SmleInputError, match="y must be numeric"):
        smle.loglik("sv", SV, ["a"] * 20, n_draws=4)


@pytest.mark.parametrize(
    "name, value, region",
    [
        ("phi", 1.0, "-1 < phi < 1"),
        ("phi", -1.5, "-1 < phi < 1"),
        ("sigma_eta", 0.0, "sigma_eta > 0"),
        ("sigma_eta", -0.1, "sigma_eta > 0"),
        ("mu", float("nan"), "mu any finite number"),
    ],
)
def test_parameters_outside_their_region(returns, name, value, region):
    with pytest.raises(SmleInputError, match=rf"params\['{name}'\] = .* {region}"):
        smle.loglik("sv", {**SV, name: value}, returns, n_draws=4)


def test_missing_and_unknown_parameter_names(returns):
    with pytest.raises(SmleInputError, match="missing sigma_eta"):
        smle.loglik("sv", dict(mu=0.0, phi=0.5), returns, n_draws=4)
    with pytest.raises(SmleInputError, match="does not know: rho"):
        smle.loglik("sv", {**SV, "rho": 0.1}, returns, n_draws=4)


@pytest.mark.parametrize("n_draws, message", [(2, ">= 4"), (7, "must be even"), (8.0, ">= 4"), (True, ">= 4")])
def test_bad_number_of_draws(returns, n_draws, message):
    with pytest.raises(SmleInputError, match=rf"n_draws = .*{message}"):
        smle.loglik("sv", SV, returns, n_draws=n_draws)


def test_odd_draws_are_fine_without_antithetic_pairs(returns):
    assert np.isfinite(smle.loglik("sv", SV, returns, n_draws=5, antithetic=False).value)


def test_bad_settings_and_seed(returns):
    with pytest.raises(SmleInputError, match="tol = -1"):
        smle.loglik("sv", SV, returns, n_draws=4, tol=-1)
    with pytest.raises(SmleInputError, match="max_iter = 0"):
        smle.loglik("sv", SV, returns, n_draws=4, max_iter=0)
    with pytest.raises(SmleInputError, match="seed = -3"):
        smle.loglik("sv", SV, returns, n_draws=4, seed=-3)


def test_unknown_model_lists_the_registry(returns):
    with pytest.raises(SmleInputError, match=r"model = 'egarch' is not a registered model; available: .*sv"):
        smle.loglik("egarch", SV, returns)


def test_grid_filter_refuses_a_random_walk_state():
    y = np.cumsum(np.ones(30))
    with pytest.raises(SmleInputError, match="stationary latent state"):
        smle.reference.grid_loglik("local-level", dict(sigma_eta=1.0, sigma_eps=1.0), y)


@settings(max_examples=25, deadline=None, derandomize=True)  # the same examples on every run: CI must not be flaky
@given(
    phi=st.floats(-0.999, 0.999),
    sigma_eta=st.floats(0.01, 3.0),
    mu=st.floats(-12.0, 5.0),
    zeros=st.integers(0, 40),
)
def test_admissible_parameters_never_give_a_nan(returns, phi, sigma_eta, mu, zeros):
    # any admissible point, with some exact zero returns, yields a finite estimate and NSE
    y = returns.copy()
    y[:zeros] = 0.0
    result = smle.loglik("sv", dict(mu=mu, phi=phi, sigma_eta=sigma_eta), y, n_draws=4)
    assert np.isfinite(result.value) and np.isfinite(result.nse)


def test_joint_constraints_are_checked_everywhere(returns):
    # GARCH covariance stationarity alpha + beta < 1 (Bollerslev 1986) is a joint constraint
    model = smle.get_model("garch-mix")
    params = {**model.start_params(returns), "alpha": 0.5, "beta": 0.6}
    for call in (lambda: smle.loglik(model, params, returns, n_draws=4),
                 lambda: smle.simulate(model, params, 50),
                 lambda: smle.fit(model, returns, start=params)):
        with pytest.raises(SmleInputError, match=r"alpha'\] \+ params\['beta'\] = 0.5 \+ 0.6 .* alpha \+ beta < 1"):
            call()
