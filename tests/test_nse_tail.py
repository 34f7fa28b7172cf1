"""A run says when its NSE cannot be trusted: the Pareto k-hat of its scoring weights.

Measured against the exact grid value (experiments/results/eis_error_sources.md, 60 runs per
row): the single-run NSE misses the error of the scoring draws' tail, not of the fitted sampler;
at a median k-hat of 0.45-0.68 the spread is 1.07-1.33 NSE, above 1 (T = 8000) it is 1.5-2.2
NSE. Vehtari, Simpson, Gelman, Yao and Gabry (2024, JMLR 25) set 0.7 as the k-hat above which no
importance-sampling estimate can be trusted whatever the sample size; smle's noisier ML fit flags at
1 (experiments/results/nse_tail.md: no run flagged where the NSE was honest, most runs where it
fell 1.7-2.1x short).
"""

import inspect

import pytest

import smle
from smle.likelihood import K_HAT_UNTRUSTED
from smle.pareto_tail import pareto_k_hat

SV = dict(mu=-7.36, phi=0.95, sigma_eta=0.26)
# the health check's run settings (tests/test_health.py uses the same: one compiled shape)
CHECK_RUN = {"n_score_draws": None, "scoring": "paths", **{name: inspect.signature(smle.check).parameters[name].default
                                       for name in ("tol", "max_iter")}}


def test_the_k_hat_reported_is_the_tail_fit_of_the_scoring_weights():
    y, _ = smle.simulate("sv", SV, 500, seed=5)
    result = smle.loglik("sv", SV, y, method="eis", scoring="paths", seed=1)
    assert result.log_weights.size >= 100  # the default scoring set is large enough for a tail fit
    assert result.k_hat == pytest.approx(pareto_k_hat(result.log_weights).k_hat, abs=1e-12)
    assert result.nse_trusted == (result.k_hat < K_HAT_UNTRUSTED)
    small = smle.loglik("sv", SV, y, method="eis", seed=1, n_draws=64, **CHECK_RUN)  # 64 weights: no tail fit
    assert small.k_hat is None and small.nse_trusted


def test_an_infinite_variance_run_says_its_nse_is_not_trusted():
    """sv with phi = 0 and sigma_eta = 2: the weights' variance is infinite (derivation in
    tests/test_health.py::test_infinite_variance_sampler_is_not_healthy; measured k-hat 2.95 with
    2000 scoring draws, every seed below the exact value by about 6 against an NSE near 1)."""
    params = dict(mu=0.0, phi=0.0, sigma_eta=2.0)
    y, _ = smle.simulate("sv", params, 500, seed=3)
    with pytest.warns(UserWarning, match="k-hat of .* likely understates the error"):
        run = smle.loglik("sv", params, y, n_draws=64, seed=0, method="eis", on_breakdown="return",
                          **{**CHECK_RUN, "n_score_draws": 2000})
    assert run.k_hat >= K_HAT_UNTRUSTED and not run.nse_trusted
    assert "not trusted" in run.nse_method and "k_hat" in repr(run)
    exact = smle.loglik("sv", params, y, method="exact").value
    assert run.value < exact  # biased low, as every seed of the check is (measured here: 2.2 below)


def test_an_exact_sampler_has_no_tail_to_fit():
    # var1-noise: the EIS sampler is the exact posterior, every weight equal (Kalman-exact)
    model = smle.get_model("var1-noise", n_series=2)
    params = {"mu_1": 0.5, "mu_2": -1.0, "phi_1": 0.8, "phi_2": 0.4, "sigma_eta_1": 0.5, "sigma_eta_2": 0.7,
              "sigma_eps_1": 0.4, "sigma_eps_2": 0.6}
    y, _ = smle.simulate(model, params, 200, seed=0)
    result = smle.loglik(model, params, y, method="eis", scoring="paths")
    assert result.k_hat is None and result.nse_trusted
