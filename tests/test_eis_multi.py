"""EIS with a k-dimensional Gaussian VAR(1) state, its Kalman reference and the state itself.

External references, named beside each check:
* the discrete Lyapunov equation: ``scipy.linalg.solve_discrete_lyapunov``;
* the k-dimensional Kalman filter: statsmodels' state-space likelihood
  (``statsmodels.tsa.statespace.mlemodel.MLEModel``, Durbin and Koopman 2012 filter);
* EIS on a linear Gaussian model: exactness follows from a quadratic log g_t (every weight
  equal; design notes section 2), checked against that Kalman filter;
* a 2-factor SV model: a deterministic two-dimensional grid filter (Kitagawa 1987, JASA 82)
  written here, whose accuracy is itself checked by refining the grid.
"""

import functools

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy.linalg import solve_discrete_lyapunov
from scipy.stats import norm

import smle  # noqa: F401  (float64)
from smle.engine import eis_multi, latent_var
from smle.engine.eis import EISSettings, weight_diagnostics
from smle.errors import SmleInputError
from smle.reference.kalman_var import kalman_loglik_var

LOG_2PI = float(np.log(2 * np.pi))
T_LINEAR = 100
T_SV = 400


def _random_stable(rng, k, radius):
    matrix = rng.normal(size=(k, k))
    return radius * matrix / np.max(np.abs(np.linalg.eigvals(matrix)))


def _random_cov(rng, k, scale, floor):
    root = scale * rng.normal(size=(k, k))
    return root @ root.T + floor * np.eye(k)


# ---------------------------------------------------------------------------------------------
# The state


@pytest.mark.parametrize("method", ["kronecker", "doubling"])
@pytest.mark.parametrize("k", [3, 11])
def test_lyapunov_matches_scipy(k, method):
    # reference: scipy.linalg.solve_discrete_lyapunov (Bartels-Stewart / direct solve)
    rng = np.random.default_rng(k)
    transition = _random_stable(rng, k, 0.97)
    innovation_cov = _random_cov(rng, k, 1.0, 0.1)
    expected = solve_discrete_lyapunov(transition, innovation_cov)
    solution = np.asarray(latent_var.lyapunov(transition, innovation_cov, method))
    assert np.max(np.abs(solution - expected)) < 1e-10 * np.max(np.abs(expected))


def test_lyapunov_gradient_matches_central_differences():
    # d Sigma / d Phi_01 by JAX against central differences of scipy's solution
    rng = np.random.default_rng(7)
    transition = _random_stable(rng, 3, 0.9)
    innovation_cov = _random_cov(rng, 3, 1.0, 0.1)

    grad = jax.grad(lambda e: latent_var.lyapunov(jnp.asarray(transition).at[0, 1].set(e), innovation_cov).sum())(
        transition[0, 1]
    )
    h = 1e-6
    plus = transition.copy()
    plus[0, 1] += h
    minus = transition.copy()
    minus[0, 1] -= h
    central = (solve_discrete_lyapunov(plus, innovation_cov).sum() - solve_discrete_lyapunov(minus, innovation_cov).sum()) / (2 * h)
    assert abs(float(grad) - central) < 1e-6 * max(1.0, abs(central))


def test_sample_path_has_the_stationary_moments():
    # one long path: sample mean and covariance against the stationary law; tolerance from the
    # measured spread of these statistics across seeds (about 0.03 on the covariance entries at
    # T = 20000 for this persistence), taken at 5x
    rng = np.random.default_rng(3)
    transition = _random_stable(rng, 2, 0.6)
    state = latent_var.stationary(np.array([1.0, -0.5]), transition, _random_cov(rng, 2, 0.5, 0.2))
    path = np.asarray(latent_var.sample_path(state, jax.random.PRNGKey(0), 20000))
    assert np.max(np.abs(path.mean(axis=0) - np.asarray(state.init_mean))) < 0.1
    assert np.max(np.abs(np.cov(path.T) - np.asarray(state.init_cov))) < 0.15


def test_non_stationary_transition_is_refused():
    with pytest.raises(SmleInputError, match=r"spectral radius 1\.02"):
        latent_var.check_stationary(np.array([[1.02, 0.0], [0.3, 0.5]]))
    with pytest.raises(SmleInputError, match="square"):
        latent_var.check_stationary(np.ones((2, 3)))


def test_non_positive_definite_covariance_is_refused():
    with pytest.raises(SmleInputError, match="innovation_cov is not positive definite"):
        latent_var.check_covariance(np.array([[1.0, 2.0], [2.0, 1.0]]))
    with pytest.raises(SmleInputError, match="symmetric"):
        latent_var.check_covariance(np.array([[1.0, 0.2], [0.1, 1.0]]))
    state = latent_var.stationary(np.zeros(2), np.diag([0.5, 0.5]), np.eye(2))
    with pytest.raises(SmleInputError, match="init_cov"):
        latent_var.check_state(state._replace(init_cov=-np.eye(2)))


def test_bad_eis_settings_are_refused():
    with pytest.raises(SmleInputError, match="n_draws=16 is too few"):
        eis_multi.check_draws(16, 5, eis_multi.full_pairs(5), antithetic=True)
    with pytest.raises(SmleInputError, match="missing"):
        eis_multi.check_pairs(((0, 1), (1, 1)), 2)
    with pytest.raises(SmleInputError, match="0 <= i <= j < 2"):
        eis_multi.check_pairs(((0, 0), (1, 1), (1, 2)), 2)


# ---------------------------------------------------------------------------------------------
# Linear Gaussian: Kalman against statsmodels, EIS against Kalman


def _linear_case(k, seed=0):
    rng = np.random.default_rng(seed)
    state = latent_var.stationary(rng.normal(size=k), _random_stable(rng, k, 0.8), _random_cov(rng, k, 0.3, 0.05))
    obs_cov = _random_cov(rng, k, 0.3, 0.1)
    path = np.asarray(latent_var.sample_path(state, jax.random.PRNGKey(seed), T_LINEAR))
    y = path + rng.multivariate_normal(np.zeros(k), obs_cov, size=T_LINEAR)
    return state, obs_cov, y


@pytest.mark.parametrize("k", [2, 5])
def test_kalman_var_matches_statsmodels(k):
    # reference: statsmodels MLEModel state-space likelihood with the same matrices and the
    # known (stationary) initialisation; measured agreement 3e-14 (k = 2) and 1e-13 (k = 5)
    from statsmodels.tsa.statespace.mlemodel import MLEModel

    state, obs_cov, y = _linear_case(k, seed=k)
    loading = np.eye(k) + 0.2 * np.random.default_rng(1).normal(size=(k, k))
    model = MLEModel(y, k_states=k)
    model["design"] = loading
    model["obs_cov"] = obs_cov
    model["transition"] = np.asarray(state.transition)
    model["state_intercept"] = np.asarray(state.intercept)
    model["selection"] = np.eye(k)
    model["state_cov"] = np.asarray(state.innovation_cov)
    model.initialize_known(np.asarray(state.init_mean), np.asarray(state.init_cov))
    # statsmodels freezes the covariance once the gain converges to 1e-19 by default, which moves
    # log L by up to 1e-8 here (measured); a zero tolerance runs the full recursion every period
    model.ssm.tolerance = 0.0
    expected = model.ssm.loglike()
    assert abs(float(kalman_loglik_var(y, state, obs_cov, loading)) - expected) < 1e-8


def _gaussian_log_obs(obs_args, paths):
    """log N(y_t; x_t, H) at paths (T, S, k), H given by its Cholesky factor."""
    y, root = obs_args
    k = root.shape[0]
    residual = y[:, None, :] - paths
    scaled = jax.scipy.linalg.solve_triangular(root, residual.reshape(-1, k).T, lower=True)
    return -0.5 * (k * LOG_2PI + 2.0 * jnp.sum(jnp.log(jnp.diag(root))) + jnp.sum(scaled**2, axis=0)).reshape(
        residual.shape[:2]
    )


@functools.partial(jax.jit, static_argnums=(3, 4))
def _linear_eis(state, obs_args, key, n_draws, pairs):
    # the observations double as the mode guess (x_t = y_t is close to the posterior mode)
    settings = EISSettings(n_draws=n_draws)
    return eis_multi.eis_loglik_multi(state, _gaussian_log_obs, obs_args, obs_args[0], key, settings, pairs)


@pytest.mark.parametrize("k", [2, 5, 10])
def test_eis_is_exact_for_a_linear_gaussian_var(k):
    # quadratic log g_t: the regressions are exact and every weight equal, so EIS equals the
    # Kalman filter to rounding (design notes section 2) for any S that identifies the basis
    state, obs_cov, y = _linear_case(k)
    n_draws = 2 * (len(eis_multi.full_pairs(k)) + 2)
    out = _linear_eis(state, (jnp.asarray(y), jnp.linalg.cholesky(obs_cov)), jax.random.PRNGKey(11), n_draws, None)
    assert abs(float(out.value) - float(kalman_loglik_var(y, state, obs_cov))) < 1e-8
    assert float(jnp.std(out.log_weights)) < 1e-8
    assert bool(out.info.converged)


def test_eis_is_exact_with_a_diagonal_basis_when_log_g_is_separable():
    # diagonal H: log g_t is a sum over components, so the squares alone span it, and few draws suffice
    k = 10
    state, obs_cov, y = _linear_case(k, seed=4)
    obs_cov = np.diag(np.diag(obs_cov))
    out = _linear_eis(
        state, (jnp.asarray(y), jnp.linalg.cholesky(obs_cov)), jax.random.PRNGKey(2), 2 * (k + 2),
        eis_multi.diagonal_pairs(k),
    )
    assert abs(float(out.value) - float(kalman_loglik_var(y, state, obs_cov))) < 1e-8


# ---------------------------------------------------------------------------------------------
# Two-factor stochastic volatility against a two-dimensional grid filter

SV_MU = 0.2
SV_PHI = np.array([0.98, 0.5])
SV_SD = np.array([0.6, 0.4])  # stationary standard deviations of the two components
SV_SIGMA = SV_SD * np.sqrt(1.0 - SV_PHI**2)
SV_SETTINGS = EISSettings(n_draws=64, tol=1e-10, max_iter=100)


def _sv_log_obs(obs_args, paths):
    mu, y = obs_args
    log_var = mu + jnp.sum(paths, axis=-1)
    return -0.5 * (LOG_2PI + log_var + y[:, None] ** 2 * jnp.exp(-log_var))


@functools.lru_cache(maxsize=1)
def _sv_data():
    state = latent_var.independent_ar1(0.0, SV_PHI, SV_SIGMA)
    path = np.asarray(latent_var.sample_path(state, jax.random.PRNGKey(5), T_SV))
    return np.exp(0.5 * (SV_MU + path.sum(axis=1))) * np.random.default_rng(1).normal(size=T_SV)


def _grid_loglik(y, n1, n2, width=6.5):
    """Point-mass filter on a product grid; the transition is separable, applied per dimension."""
    g1 = np.linspace(-width * SV_SD[0], width * SV_SD[0], n1)
    g2 = np.linspace(-width * SV_SD[1], width * SV_SD[1], n2)
    h1, h2 = g1[1] - g1[0], g2[1] - g2[0]
    kernel1 = norm.pdf(g1[:, None], SV_PHI[0] * g1[None, :], SV_SIGMA[0]) * h1
    kernel2 = norm.pdf(g2[:, None], SV_PHI[1] * g2[None, :], SV_SIGMA[1]) * h2
    predicted = np.outer(norm.pdf(g1, 0.0, SV_SD[0]) * h1, norm.pdf(g2, 0.0, SV_SD[1]) * h2)
    log_var = SV_MU + g1[:, None] + g2[None, :]
    total = 0.0
    for obs in y:
        joint = predicted * np.exp(-0.5 * (LOG_2PI + log_var + obs**2 * np.exp(-log_var)))
        mass = joint.sum()
        total += np.log(mass)
        predicted = kernel1 @ (joint / mass) @ kernel2.T
    return total


def _sv_value(theta, key):
    mu, phi1, sigma1, phi2, sigma2 = theta
    state = latent_var.independent_ar1(0.0, jnp.stack([phi1, phi2]), jnp.stack([sigma1, sigma2]))
    out = eis_multi.eis_loglik_multi(
        state, _sv_log_obs, (mu, jnp.asarray(_sv_data())), jnp.zeros((T_SV, 2)), key, SV_SETTINGS
    )
    return out.value, out


_sv_jit = jax.jit(_sv_value)
SV_THETA = jnp.array([SV_MU, SV_PHI[0], SV_SIGMA[0], SV_PHI[1], SV_SIGMA[1]])


def test_two_factor_sv_agrees_with_a_grid_filter():
    y = _sv_data()
    exact = _grid_loglik(y, 241, 61)
    # the grid itself: refining it by 1.5x per dimension moves log L by 5e-9 (measured)
    assert abs(exact - _grid_loglik(y, 361, 91)) < 1e-6
    # measured at T = 400, S = 64 over 4 seeds: delta-method NSE 0.03-0.08, errors within 2 NSE
    for seed in range(4):
        value, out = _sv_jit(SV_THETA, jax.random.PRNGKey(seed))
        nse = float(weight_diagnostics(out.log_weights, True)["nse"])
        assert bool(out.info.converged)
        assert abs(float(value) - exact) < 4.0 * nse, (seed, float(value), exact, nse)


def test_two_factor_sv_gradient_matches_central_differences():
    # implicit-function gradient against central differences of the same function (same draws,
    # fixed point to 1e-10): measured relative agreement about 1e-6
    key = jax.random.PRNGKey(0)
    grad = np.asarray(jax.jit(jax.grad(lambda th: _sv_value(th, key)[0]))(SV_THETA))
    h = 1e-5
    central = np.array([
        (float(_sv_jit(SV_THETA.at[i].add(h), key)[0]) - float(_sv_jit(SV_THETA.at[i].add(-h), key)[0])) / (2 * h)
        for i in range(SV_THETA.shape[0])
    ])
    assert np.allclose(grad, central, rtol=1e-4, atol=1e-4), (grad, central)


def test_batched_regressions_make_no_lapack_calls_and_match_scipy():
    """The per-period normal equations with more than SMALL_BASIS regressors are solved by array
    operations, not by jaxlib's batched LAPACK kernels: two of those in flight at once (the two
    regressions of an antithetic iteration) deadlocked on a 2-core machine (factor-sv, N = 10,
    T = 2000, jaxlib 0.10.2). The compiled program must hold no LAPACK call, and the solution must
    equal SciPy's least squares (LAPACK gelsd, an outside reference) per period."""
    from scipy.linalg import lstsq

    from smle.engine.multi_basis import SMALL_BASIS, _least_squares

    rng = np.random.default_rng(4)
    design = rng.normal(size=(6, 40, SMALL_BASIS + 3))
    response = design @ rng.normal(size=SMALL_BASIS + 3) + 0.1 * rng.normal(size=(6, 40))
    program = jax.jit(_least_squares).lower(jnp.asarray(design), jnp.asarray(response)).as_text()
    assert "lapack" not in program.lower()
    coefficients, _ = _least_squares(jnp.asarray(design), jnp.asarray(response))
    for t in range(design.shape[0]):
        np.testing.assert_allclose(coefficients[t], lstsq(design[t], response[t])[0], rtol=1e-9, atol=1e-11)
