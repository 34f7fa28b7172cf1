"""The ``var1-noise`` model: a k-dimensional VAR(1) state observed with noise, through the public
API (smle.loglik, smle.simulate, smle.fit) against the Kalman filter.

External reference: ``smle.reference.kalman_var`` is itself checked against statsmodels'
state-space likelihood (``statsmodels.tsa.statespace.mlemodel.MLEModel``) in
tests/test_eis_multi.py (agreement 1e-13). log g_t is quadratic, so EIS equals the Kalman
likelihood to rounding error (Richard and Zhang 2007, J. Econometrics 141: the EIS regression is
exact for a Gaussian integrand).
"""

import jax.numpy as jnp
import numpy as np
import pytest
from scipy.optimize import minimize

import smle
from smle.errors import SmleInputError
from smle.reference import kalman_loglik_var
from smle.results import FitResult
from smle.validation import jax_params

T = 100
N_DRAWS = 32


def _params(model, seed):
    rng = np.random.default_rng(seed)
    k = model.n_series
    out = {}
    for i in range(1, k + 1):
        out.update({f"mu_{i}": rng.normal(), f"phi_{i}": rng.uniform(-0.5, 0.95),
                    f"sigma_eta_{i}": rng.uniform(0.2, 1.0), f"sigma_eps_{i}": rng.uniform(0.2, 1.0)})
    if model.transition == "full":
        matrix = 0.3 * rng.normal(size=(k, k))
        matrix = 0.9 * matrix / np.max(np.abs(np.linalg.eigvals(matrix)))
        out.update({f"phi_{i + 1}_{j + 1}": float(matrix[i, j]) for i in range(k) for j in range(k)})
    return {n: float(out[n]) for n in model.param_names}


def _kalman(model, params, y):
    state = model.latent_var(jax_params(params))
    noise = jnp.diag(jnp.array([params[f"sigma_eps_{i + 1}"] ** 2 for i in range(model.n_series)]))
    return float(kalman_loglik_var(y, state, noise))


@pytest.mark.parametrize("k, transition", [(2, "diagonal"), (2, "full"), (5, "diagonal"), (10, "diagonal")])
def test_eis_equals_the_kalman_filter(k, transition):
    # measured: |EIS - Kalman| <= 5e-13 for k = 2, 5, 10; the tolerance 1e-8 leaves room for rounding
    model = smle.get_model("var1-noise", n_series=k, transition=transition)
    params = _params(model, seed=k)
    y, x = smle.simulate(model, params, T, seed=1)
    assert y.shape == (T, k) and x.shape == (T, k)
    kalman = _kalman(model, params, y)
    result = smle.loglik(model, params, y, n_draws=N_DRAWS, n_score_draws=None, method="eis",
                         scoring="paths")  # a scoring set of N_DRAWS
    assert result.converged
    assert abs(result.value - kalman) < 1e-8
    assert result.paths.shape == (T, N_DRAWS, k)
    assert result.smoothed_mean().shape == (T, k)
    # particle scoring (the default): the sampler is the exact posterior, so every incremental
    # weight is equal and no resampling is due (measured: |error| at most 4e-12 for k = 2 at T = 2000
    # and 8000, experiments/results/particle_eis_multi.md)
    particles = smle.loglik(model, params, y, n_draws=N_DRAWS, method="eis")
    assert particles.scoring == "particles" and particles.resamplings == 0
    assert abs(particles.value - kalman) < 1e-8


def test_fit_equals_the_kalman_maximum_likelihood_and_round_trips():
    # EIS is exact here, so smle.fit must land on the maximiser of the Kalman likelihood, found
    # independently by SciPy's BFGS on the same unconstrained parameters
    model = smle.get_model("var1-noise", n_series=2)
    truth = {"mu_1": 0.5, "mu_2": -1.0, "phi_1": 0.8, "phi_2": 0.4, "sigma_eta_1": 0.5, "sigma_eta_2": 0.7,
             "sigma_eps_1": 0.4, "sigma_eps_2": 0.6}
    y, _ = smle.simulate(model, truth, T, seed=5)
    result = smle.fit(model, y, n_draws=N_DRAWS, start=truth, method="eis")
    assert result.converged, result.message

    def negative(u):
        return -_kalman(model, {n: float(v) for n, v in model.from_real(jnp.asarray(u)).items()}, y)

    reference = minimize(negative, np.asarray(model.to_real(truth)), method="BFGS", options={"gtol": 1e-7})
    expected = model.from_real(jnp.asarray(reference.x))
    for name in model.param_names:
        assert abs(result.params[name] - float(expected[name])) < 1e-3 * (1 + abs(float(expected[name]))), name
    assert abs(result.loglik + reference.fun) < 1e-6
    assert result.smoothed_mean.shape == (T, 2) and result.smoothed_lower.shape == (T, 2)
    assert np.all(result.smoothed_lower <= result.smoothed_upper)
    back = FitResult.from_json(result.to_json())
    assert back.smoothed_mean.shape == (T, 2)
    assert np.array_equal(back.smoothed_upper, result.smoothed_upper)


def test_bad_options_and_unavailable_features_are_refused():
    with pytest.raises(SmleInputError, match="n_series = 1"):
        smle.get_model("var1-noise", n_series=1)
    with pytest.raises(SmleInputError, match="transition = 'upper'"):
        smle.get_model("var1-noise", transition="upper")
    model = smle.get_model("var1-noise", n_series=2, transition="full")
    params = _params(model, seed=2)
    explosive = {**params, "phi_1_1": 1.1, "phi_1_2": 0.0}
    with pytest.raises(SmleInputError, match="spectral radius"):
        smle.simulate(model, explosive, T)
    y, _ = smle.simulate(model, params, T)
    with pytest.raises(SmleInputError, match="not yet available for a 2-dimensional state"):
        smle.loglik(model, params, y, control_variates="draws", method="eis")
    with pytest.raises(SmleInputError, match="n_draws=6 is too few"):
        smle.loglik(model, params, y, n_draws=6, method="eis")
    with pytest.raises(SmleInputError, match="method = 'exact' needs a one-dimensional latent state"):
        smle.filter_factor(model, params, y, method="exact")
    with pytest.raises(SmleInputError, match="n_draws=6 is too few"):
        smle.check(model, params, y, n_draws=6)
    with pytest.raises(SmleInputError, match=r"expects shape \(T, 2\)"):
        smle.loglik(model, params, y[:, 0])


def test_a_study_replication_of_a_k_dimensional_model():
    # one replication of a study design (smle.study): simulate, fit by EIS (the shape and settings of
    # the fit above, one compiled program); EIS is exact here, so the row's log-likelihood is the
    # Kalman filter's at the row's estimates
    from smle.study.replication import run_replication

    model = smle.get_model("var1-noise", n_series=2)
    truth = {"mu_1": 0.5, "mu_2": -1.0, "phi_1": 0.8, "phi_2": 0.4, "sigma_eta_1": 0.5, "sigma_eta_2": 0.7,
             "sigma_eps_1": 0.4, "sigma_eps_2": 0.6}
    design = dict(name="var1", model="var1-noise", model_options={"n_series": 2}, params=truth, n_periods=T,
                  replications=1, estimator={"n_draws": N_DRAWS, "start": "truth"})
    row = run_replication(design, 7, 0)
    assert row["status"] == "ok", row["error"]
    estimates = {e["parameter"]: e["estimate"] for e in row["estimates"]}
    assert set(estimates) == set(model.param_names)
    y, _ = smle.simulate(model, truth, T, seed=row["data_seed"])
    assert abs(row["loglik"] - _kalman(model, estimates, y)) < 1e-6
