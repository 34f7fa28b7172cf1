"""Parameter uncertainty in forecasts (smle.forecast(..., parameter_draws=N)).

* The draws follow the fit's asymptotic normal law on its unconstrained scale: for ``mu``, whose
  map is the identity, their variance is the fit's squared standard error (chi-square sampling
  error of a variance, Var(s^2) = 2 sigma^4 / (N - 1)); fixed parameters hold exactly.
* With a tiny covariance the pooled forecast is the forecast at the estimates, within the
  Monte Carlo errors of both.
* On a short sample the k-step cumulative return's variance grows by about k^2 Var(mu-hat): by
  the law of total variance, Var(sum r) = E[Var(sum r | theta)] + Var(E[sum r | theta]), and
  E[sum r | theta] = k mu when ar1 = 0 (the variance path depends on mu only through the
  residuals, a small part; measured below).
* The draws and the pooled paths are a function of the seed.
"""

import dataclasses

import numpy as np
import pytest

import smle
from smle.decision.parameter_draws import parameter_sample
from smle.models import get_model

GARCH = {"mu": 0.03, "ar1": 0.0, "omega": 0.05, "alpha": 0.1, "beta": 0.85}
HELD = {"ar1": 0.0, "alpha": 0.1, "beta": 0.85}
K, PATHS, DRAWS = 50, 20000, 200


@pytest.fixture(scope="module")
def short_fit():
    # T = 100, mu and omega free: se(mu) 0.10, so k^2 Var(mu) = 27 against a k-step variance of 61
    y, _ = smle.simulate("garch", GARCH, 100, seed=11)
    result = smle.fit("garch", np.asarray(y), fixed=HELD, verbose=False)
    assert result.converged
    return result


@pytest.fixture(scope="module")
def known(short_fit):
    return smle.forecast(short_fit, K, n_paths=PATHS, seed=2)


@pytest.fixture(scope="module")
def pooled(short_fit):
    return smle.forecast(short_fit, K, n_paths=PATHS, seed=2, parameter_draws=DRAWS)


def test_draws_follow_the_asymptotic_normal_law(short_fit):
    model = get_model("garch")
    n = 4000
    sample, note = parameter_sample(model, short_fit.params, short_fit.covariance, short_fit.fixed, n, seed=0)
    assert note == ""  # unconstrained sds 0.10 (mu) and 0.30 (log omega)
    mu = np.array([d["mu"] for d in sample])
    se = short_fit.std_errors["mu"]
    assert abs(mu.mean() - short_fit.params["mu"]) < 4.5 * se / np.sqrt(n)
    assert abs(mu.var(ddof=1) / se**2 - 1) < 4.5 * np.sqrt(2 / (n - 1))
    # omega = exp(u) on its own bijection: log omega is normal with sd se(omega) / omega (delta method)
    log_omega = np.log([d["omega"] for d in sample])
    assert abs(log_omega.std(ddof=1) / (short_fit.std_errors["omega"] / short_fit.params["omega"]) - 1) < 0.1
    assert all(d[k] == v for d in sample for k, v in HELD.items())


def test_a_tiny_covariance_gives_the_forecast_at_the_estimates(short_fit, known):
    tiny = dataclasses.replace(short_fit, covariance=short_fit.covariance * 1e-12)
    pooled = smle.forecast(tiny, K, n_paths=PATHS, seed=2, parameter_draws=DRAWS)
    assert pooled.parameter_draws == DRAWS and known.parameter_draws == 0
    for quantity in ("return", "cumulative return", "variance"):
        a, b = known.stats[quantity], pooled.stats[quantity]
        # other random numbers, the same law: within 4.5 combined standard errors (measured over 4
        # seeds: largest |z| 2.0-3.2); the variance at step 1 is known exactly (se 0), so parameter
        # draws within 1e-6 of the estimates move it by ~1e-7, allowed as 1e-5 relative
        gap = np.abs(a["mean"] - b["mean"])
        # with the parameters nearly equal, the cluster-robust error is the independent-paths one
        # (200 clusters: the estimate's relative sd about 1 / sqrt(400) = 5%; largest gap over the 49
        # steps measured at 0.06-0.15 over seeds 0-2)
        steps = slice(1, None) if quantity == "variance" else slice(None)  # step-1 variance: known, se 0
        assert np.all(np.abs(b["mean_se"][steps] / a["mean_se"][steps] - 1) < 0.25), quantity
        assert np.all(gap < 4.5 * np.hypot(a["mean_se"], b["mean_se"]) + 1e-5 * np.abs(a["mean"])), quantity
        if "var" in a:
            assert np.all(np.abs(a["var"] - b["var"]) < 4.5 * np.hypot(a["var_se"], b["var_se"])), quantity


def test_parameter_error_widens_the_cumulative_bands(short_fit, known, pooled):
    a, b = known.stats["cumulative return"], pooled.stats["cumulative return"]
    mu = np.array([d["mu"] for d in pooled.parameter_sample])
    increase = b["sd"][-1] ** 2 - a["sd"][-1] ** 2
    # measured over seeds 0-3: increase / (K^2 var(mu draws)) = 1.10, 1.24, 0.99, 1.04 (Monte Carlo
    # error of the pooled variance and the small part through omega and the residuals)
    assert 0.75 < increase / (K**2 * mu.var(ddof=1)) < 1.5
    # the 1% and 5% VaR of the 50-day return widen far beyond their Monte Carlo errors (measured 4.5 and 2.7)
    assert np.all(b["var"][:, -1] - a["var"][:, -1] > 6 * np.hypot(a["var_se"][:, -1], b["var_se"][:, -1]))
    # the means' errors are cluster-robust (200 draws of 100 paths): at the horizon the between-draw
    # spread of mu dominates, K se(mu) / sqrt(200) = 0.37 against the independent-paths 0.07
    # (measured over seeds 0-2: ratios 0.96, 1.07, 1.01 to the first and 5.3-5.6 to the second)
    se = b["mean_se"][-1]
    assert abs(se / (K * short_fit.std_errors["mu"] / np.sqrt(DRAWS)) - 1) < 0.25
    assert se > 3 * b["sd"][-1] / np.sqrt(PATHS)
    text = pooled.summary()
    assert f"pooled over {DRAWS} draws" in text and "taken as known" in known.summary()
    assert pooled.to_dict()["parameter_draws"] == DRAWS and "parameter_sample" not in pooled.to_dict()


def test_draws_are_a_function_of_the_seed(short_fit, pooled):
    again = smle.forecast(short_fit, K, n_paths=PATHS, seed=2, parameter_draws=DRAWS)
    assert again.parameter_sample == pooled.parameter_sample
    np.testing.assert_array_equal(again.paths["return"], pooled.paths["return"])
    other = smle.forecast(short_fit, K, n_paths=PATHS, seed=3, parameter_draws=DRAWS)
    assert other.parameter_sample[0]["mu"] != pooled.parameter_sample[0]["mu"]


def test_parameter_draws_are_checked(short_fit):
    for bad in (1, -1, 1.5, PATHS + 1):
        with pytest.raises(smle.SmleInputError, match="parameter_draws"):
            smle.forecast(short_fit, 2, n_paths=PATHS, parameter_draws=bad)
    no_covariance = dataclasses.replace(short_fit, covariance=np.full_like(short_fit.covariance, np.nan))
    with pytest.raises(smle.SmleInputError, match="covariance"):
        smle.forecast(no_covariance, 2, n_paths=PATHS, parameter_draws=10)


def test_forecast_command_with_parameter_draws(short_fit, tmp_path, capsys):
    from smle.cli.app import main

    short_fit.to_json(tmp_path / "result.json")
    command = ["forecast", "--from-fit", str(tmp_path / "result.json"), "--horizon", "3", "--paths", "1000"]
    assert main(command + ["--parameter-draws", "20"]) == 0
    assert "pooled over 20 draws" in capsys.readouterr().out
    assert main(command + ["--parameter-draws", "1"]) == 2
    assert "parameter_draws = 1" in capsys.readouterr().err


def test_a_weakly_identified_estimate_is_flagged(recwarn):
    # garch on 100 periods with alpha and beta free: beta-hat 0.04 +- 0.50, near the edge of its
    # region, its logistic coordinate's sd 12 (measured); draws reach alpha + beta = 1 and the
    # pooled variance explodes (a 95% quantile of 5e6 against 1.3 measured with 20 draws)
    y, _ = smle.simulate("garch", GARCH, 100, seed=11)
    loose = smle.fit("garch", np.asarray(y), fixed={"ar1": 0.0}, verbose=False)
    pooled = smle.forecast(loose, 2, n_paths=1000, seed=0, parameter_draws=20)
    assert "beta (sd" in pooled.parameter_note and "beta (sd" in pooled.summary()
    assert any("normal law is wide" in str(w.message) for w in recwarn.list)
