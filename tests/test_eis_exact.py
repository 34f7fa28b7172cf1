"""EIS is exact for linear Gaussian models (DESIGN section 2).

With a quadratic log g_t the EIS regressions are exact, every importance weight is equal, and the
estimate equals the Kalman-filter log-likelihood (itself checked against statsmodels in
test_reference.py) to rounding error, for any number of draws S >= 3.
"""

import numpy as np
import pytest

import smle
from smle.reference import kalman_loglik


def _random_params(rng):
    return dict(
        mu=rng.normal(0, 2),
        phi=rng.uniform(-0.98, 0.995),
        sigma_eta=rng.uniform(0.05, 2.0),
        sigma_eps=rng.uniform(0.05, 3.0),
    )


@pytest.mark.parametrize("n_periods", [40, 500])
# With antithetic pairs, S = 4 leaves only two distinct |x - mean| values per period, and the
# quadratic regression's conditioning then depends on how close the two draws are: measured
# errors reach 8e-8 there. From three pairs on it is exact to rounding.
@pytest.mark.parametrize("n_draws", [6, 32])
def test_eis_equals_kalman_for_ar1_plus_noise(n_periods, n_draws):
    model = smle.get_model("ar1-noise")
    rng = np.random.default_rng(1000 * n_periods + n_draws)
    for draw in range(20):
        params = _random_params(rng)
        y, _ = smle.simulate(model, params, n_periods, seed=draw)
        result = smle.loglik(model, params, y, n_draws=n_draws, seed=draw, method="eis")
        exact = float(kalman_loglik(y, model.latent(params), params["sigma_eps"] ** 2))
        assert result.value == pytest.approx(exact, abs=1e-8), (params, result.value - exact)
        assert result.nse < 1e-7  # equal weights up to rounding
        assert result.ess == pytest.approx(result.n_score_draws, rel=1e-9)  # every scoring weight equal
        assert result.converged


def test_eis_equals_kalman_without_antithetic_draws():
    model = smle.get_model("ar1-noise")
    params = dict(mu=0.3, phi=0.9, sigma_eta=0.4, sigma_eps=1.1)
    y, _ = smle.simulate(model, params, 500, seed=2)
    result = smle.loglik(model, params, y, n_draws=5, seed=1, antithetic=False, method="eis")
    exact = float(kalman_loglik(y, model.latent(params), 1.1**2))
    assert result.value == pytest.approx(exact, abs=1e-8)


def test_eis_equals_kalman_for_local_level_on_nile(nile):
    # Durbin and Koopman (2012, section 2.10) maximum-likelihood values (recalled from memory)
    params = dict(sigma_eps=np.sqrt(15099.0), sigma_eta=np.sqrt(1469.1))
    model = smle.get_model("local-level")
    result = smle.loglik(model, params, nile, n_draws=4, seed=0, method="eis")
    exact = float(kalman_loglik(nile, model.latent(params), 15099.0))
    assert result.value == pytest.approx(exact, abs=1e-8)
    diffuse = float(kalman_loglik(nile, model.latent(params), 15099.0, diffuse=True))
    # the large-variance start approximates the exact diffuse likelihood (model docstring)
    assert result.value + 0.5 * np.log(model.init_var) == pytest.approx(diffuse, abs=1e-4)
