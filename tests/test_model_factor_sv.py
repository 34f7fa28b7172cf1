"""The ``factor-sv`` model (one common and N idiosyncratic log-variance factors) for N = 2,
against a bootstrap particle filter with many particles.

External reference: the bootstrap particle filter (Gordon, Salmond and Smith 1993, IEE
Proceedings F 140) with systematic resampling (Kitagawa 1996, J. Comput. Graph. Statist. 5),
written here in NumPy, independent of smle's engine; its log-likelihood is unbiased for L up to
the log's small downward bias (of order the variance over 2, about 0.002 here).
"""

import numpy as np
import pytest

import smle
from smle.errors import SmleInputError

T = 200
PARAMS = dict(phi_f=0.95, a_1=0.0, a_2=0.3, b_1=0.5, b_2=0.4, phi_1=0.9, phi_2=0.8, sigma_eta_1=0.3,
              sigma_eta_2=0.35)
N_PARTICLES = 20000
PF_RUNS = 3
PF_SD = 0.063  # sd of one run's log L across 6 seeds at 20000 particles (measured, this data set)


def _particle_filter(y, n_particles, seed):
    rng = np.random.default_rng(seed)
    phi = np.array([PARAMS["phi_f"], PARAMS["phi_1"], PARAMS["phi_2"]])
    scale = np.array([np.sqrt(1 - PARAMS["phi_f"] ** 2), PARAMS["sigma_eta_1"], PARAMS["sigma_eta_2"]])
    mean_log_var, loading = np.array([PARAMS["a_1"], PARAMS["a_2"]]), np.array([PARAMS["b_1"], PARAMS["b_2"]])
    x = rng.normal(size=(n_particles, 3)) * scale / np.sqrt(1 - phi**2)
    total = 0.0
    for t in range(y.shape[0]):
        if t:
            x = phi * x + scale * rng.normal(size=(n_particles, 3))
        log_var = mean_log_var + loading * x[:, :1] + x[:, 1:]
        log_w = -0.5 * np.sum(np.log(2 * np.pi) + log_var + y[t] ** 2 * np.exp(-log_var), axis=1)
        top = log_w.max()
        w = np.exp(log_w - top)
        total += top + np.log(w.mean())
        ancestors = np.searchsorted(np.cumsum(w / w.sum()), (rng.random() + np.arange(n_particles)) / n_particles)
        x = x[np.minimum(ancestors, n_particles - 1)]
    return total


@pytest.fixture(scope="module")
def data_and_reference():
    model = smle.get_model("factor-sv", n_series=2)
    y, x = smle.simulate(model, PARAMS, T, seed=7)
    assert y.shape == (T, 2) and x.shape == (T, 3)
    return model, y, np.mean([_particle_filter(y, N_PARTICLES, seed) for seed in range(PF_RUNS)])


@pytest.mark.parametrize("scoring", ["paths", "particles"])
def test_eis_agrees_with_a_bootstrap_particle_filter(data_and_reference, scoring):
    model, y, reference = data_and_reference
    # measured over 4 EIS seeds with path scoring: NSE 0.045-0.073; EIS minus the 6-run PF mean
    # -0.15 to +0.003. Particle scoring (the default of method="eis"), seed 0: NSE 0.023.
    result = smle.loglik(model, PARAMS, y, n_draws=64, seed=0, tol=1e-8, max_iter=100, method="eis", scoring=scoring)
    assert result.converged and result.scoring == scoring
    combined = np.sqrt(result.nse**2 + PF_SD**2 / PF_RUNS)
    assert abs(result.value - reference) < 4.0 * combined, (result.value, reference, combined)
    if scoring == "paths":
        assert result.smoothed_mean().shape == (T, 3)


def test_bad_options_are_refused():
    with pytest.raises(SmleInputError, match="n_series = 11"):
        smle.get_model("factor-sv", n_series=11)
    with pytest.raises(SmleInputError, match=r"params\['b_1'\] = -0.5"):
        smle.simulate(smle.get_model("factor-sv", n_series=2), {**PARAMS, "b_1": -0.5}, T)
