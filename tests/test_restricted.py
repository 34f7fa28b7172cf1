"""Restricted fits (``fixed=``) and the closed-form path of models without a latent state.

Outside references: the closed-form likelihood is checked against SciPy densities in
tests/test_model_garch.py; here the engine path (smle.loglik, smle.fit) is checked against it,
and a restricted fit of garch-mix at rho = 0 against the closed-form GARCH-NIG fit, which is
the same model (Forsberg and Bollerslev 2002, J. Applied Econometrics 17).
"""

import jax.numpy as jnp
import numpy as np
import pytest

import smle
from smle.errors import SmleInputError
from smle.restricted import Restriction, check_fixed

BASE = dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.06, beta=0.90)
NIG = {**BASE, "gamma": -0.4, "lambda": 1.5}


def test_loglik_of_a_closed_form_model_is_exact_and_says_so():
    model = smle.get_model("garch", innovations="t")
    params = {**BASE, "nu": 6.0}
    y, _ = smle.simulate(model, params, 300, seed=3)
    result = smle.loglik(model, params, y, n_draws=8, seed=5, method="eis")  # EIS settings are not used
    assert result.method == "closed form" and result.nse == 0.0
    assert result.value == pytest.approx(float(model.loglik_closed_form(params, jnp.asarray(y))), rel=1e-13)
    assert "closed form" in repr(result)
    with pytest.raises(SmleInputError, match="likelihood is exact.*no simulation error to measure, check"):
        smle.check(model, params, y, n_seeds=3, draws_grid=None, tail_draws=100)


@pytest.mark.parametrize("fixed", [{"alpha": 0.2}, {"beta": 0.5}, {"alpha": 0.1, "beta": 0.3}, {"ar1": 0.0}])
def test_pinning_holds_fixed_values_and_keeps_the_joint_constraint(fixed):
    # every point of the free space maps to admissible values with the fixed ones exact
    model = smle.get_model("garch-mix")
    restriction = Restriction.of(model, fixed)
    rng = np.random.default_rng(0)
    for _ in range(20):
        params = restriction.natural(jnp.asarray(rng.normal(0, 3, len(restriction.free_names))))
        for name, value in fixed.items():
            assert float(params[name]) == value
        assert 0 < float(params["alpha"]) and 0 < float(params["beta"])
        assert float(params["alpha"] + params["beta"]) < 1
    # and the free coordinates of admissible start values give those start values back
    start = {**NIG, "rho": 0.5, **fixed}
    if "alpha" in fixed or "beta" in fixed:
        start.update({k: v for k, v in {"alpha": 0.1, "beta": 0.3}.items() if k not in fixed})
    back = restriction.natural(restriction.free_start(start))
    assert {k: pytest.approx(float(v), rel=1e-10, abs=1e-12) for k, v in back.items()} == start


def test_fixed_values_are_validated():
    model = smle.get_model("garch-mix")
    with pytest.raises(SmleInputError, match="fixed names 'phi'.*its parameters are: mu, ar1"):
        check_fixed(model, {"phi": 0.0})
    with pytest.raises(SmleInputError, match=r"fixed\['rho'\] = 1.0 is on the boundary.*-1 < rho < 1.*open"):
        check_fixed(model, {"rho": 1.0})
    with pytest.raises(SmleInputError, match=r"fixed\['omega'\] = -0.1 is outside"):
        check_fixed(model, {"omega": -0.1})
    with pytest.raises(SmleInputError, match=r"fixed\['rho'\] = 'zero' is not a real number"):
        check_fixed(model, {"rho": "zero"})
    with pytest.raises(SmleInputError, match="alpha \\+ beta < 1"):
        check_fixed(model, {"alpha": 0.5, "beta": 0.6})
    with pytest.raises(SmleInputError, match="nothing is left to estimate"):
        check_fixed(smle.get_model("garch"), BASE)
    with pytest.raises(SmleInputError, match="fixed = .*mapping"):
        check_fixed(model, [("rho", 0.0)])
    assert check_fixed(model, {"rho": 0, "ar1": np.float32(0)}) == {"rho": 0.0, "ar1": 0.0}


def test_garch_mix_with_rho_fixed_at_zero_is_the_garch_nig_fit():
    # garch-mix at rho = 0 (ig link) is GARCH with NIG innovations exactly; its EIS fit with rho
    # held at 0 must find the closed-form fit's estimates. Measured differences on this sample,
    # seeds 0 and 1 of 32 draws: at most 0.13 standard errors (gamma, lambda); tolerance 0.3.
    nig = smle.get_model("garch", innovations="nig")
    y, _ = smle.simulate(nig, NIG, 500, seed=13)
    exact = smle.fit(nig, y)
    restricted = smle.fit("garch-mix", y, n_draws=32, seed=1, fixed={"rho": 0.0}, method="eis")
    assert restricted.params["rho"] == 0.0 and restricted.fixed == {"rho": 0.0}
    assert np.isnan(restricted.std_errors["rho"]) and np.all(restricted.covariance[-1] == 0)
    for name in nig.param_names:
        assert abs(restricted.params[name] - exact.params[name]) < 0.3 * exact.std_errors[name], name
    assert restricted.aic == pytest.approx(-2 * restricted.loglik + 2 * 7)
    rows = restricted.summary().splitlines()
    assert [line.split() for line in rows if line.strip().startswith("rho ")] == [["rho", "0.00000", "(fixed)"]]
    back = smle.FitResult.from_json(restricted.to_json())
    assert back.fixed == {"rho": 0.0}
