"""The `garch-mix` model: an AR(1)-GARCH(1,1) scale (Bollerslev 1986) times a persistent latent
unit-mean mixing factor; at rho = 0 with the ig link, GARCH with NIG innovations
(Barndorff-Nielsen 1997; Forsberg and Bollerslev 2002)."""

import math

import jax.numpy as jnp
import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy import integrate, stats

import smle
from smle.distributions import normal_to_inverse_gaussian
from smle.errors import SmleInputError
from smle.models import get_model

from _model_checks import N_DRAWS, assert_eis_matches, assert_eis_matches_grid, binomial_bound, eis_across_seeds

BASE = dict(mu=0.03, ar1=0.05, omega=0.05, alpha=0.06, beta=0.90, gamma=-0.4)
IG = {**BASE, "lambda": 1.5, "rho": 0.9}
LOGNORMAL = {**BASE, "s": 0.6, "rho": 0.9}
REALIZED = {**IG, "xi": -0.2, "sigma_u": 0.4}

MODELS = {
    "ig": (get_model("garch-mix"), IG),
    "lognormal": (get_model("garch-mix", link="lognormal"), LOGNORMAL),
    "ig-realized": (get_model("garch-mix", realized=True), REALIZED),
}


def gaussian_garch_loglik(params, r):
    """Gaussian AR(1)-GARCH(1,1) log-likelihood, written out with a Python loop (Bollerslev 1986),
    with the model's start-up convention m_1 = mu / (1 - ar1), h_1 = omega / (1 - alpha - beta)."""
    mu, ar1, omega, alpha, beta = (params[k] for k in ("mu", "ar1", "omega", "alpha", "beta"))
    h = omega / (1 - alpha - beta)
    total, previous = 0.0, None
    es, hs = [], []
    for t, value in enumerate(r):
        mean = mu / (1 - ar1) if t == 0 else mu + ar1 * previous
        e = value - mean
        total += stats.norm.logpdf(e, 0.0, np.sqrt(h))
        es.append(e)
        hs.append(h)
        h = omega + alpha * e**2 + beta * h
        previous = value
    return total, np.array(es), np.array(hs)


@pytest.fixture(scope="module")
def data():
    return {key: smle.simulate(model, params, 500, seed=13)[0] for key, (model, params) in MODELS.items()}


@pytest.mark.parametrize("key", sorted(MODELS))
def test_eis_agrees_with_grid_filter(data, key):
    model, params = MODELS[key]
    nse, _ = assert_eis_matches_grid(model, params, data[key])
    assert nse < 0.1  # measured about 0.02-0.03 at these designs


def test_interpolated_link_matches_the_exact_quantile():
    # the table of log W used by the likelihood against smle's exact IG quantile (itself tested
    # against SciPy in test_distributions.py): within 2e-7 on [-9, 9] over the admissible lambda
    model = get_model("garch-mix")
    x = jnp.linspace(-9.0, 9.0, 20001)
    for shape in (0.0101, 0.1, 1.0, 10.0, 1e3, 9.9e3):
        params = {**IG, "lambda": jnp.asarray(shape)}
        table, ends = model.log_mixing_table(params["lambda"])
        data = model.prepare(params, jnp.zeros(20))._replace(table=table, end_slopes=ends)
        approx = model.log_mixing(params, data, x)
        exact = jnp.log(normal_to_inverse_gaussian(x, 1.0, shape))
        assert float(jnp.max(jnp.abs(approx - exact))) < 2e-7, shape


def test_closed_form_independent_case_against_quad_and_eis(data):
    # GARCH-NIG likelihood against a per-period quad over w of IG(w; 1, lambda) (scipy.stats
    # invgauss, mean 1 = mu * scale with scale = lambda) times N(e; sqrt(h) gamma (w-1)/c, h w/c^2),
    # with (e_t, h_t) from the independent Python recursion above
    model, params = MODELS["ig"]
    params = {**params, "rho": 0.0}
    y = data["ig"]
    _, e, h = gaussian_garch_loglik(params, y)
    shape, gamma = params["lambda"], params["gamma"]
    c = np.sqrt(1 + gamma**2 / shape)
    ig_pdf = lambda w: math.sqrt(shape / (2 * math.pi * w**3)) * math.exp(-shape * (w - 1) ** 2 / (2 * w))
    assert abs(ig_pdf(0.7) - stats.invgauss(mu=1 / shape, scale=shape).pdf(0.7)) < 1e-14  # scalar form vs scipy

    def period(e_t, h_t):
        def f(w):
            sd = math.sqrt(h_t * w) / c
            return ig_pdf(w) * math.exp(-0.5 * ((e_t - math.sqrt(h_t) * gamma * (w - 1) / c) / sd) ** 2) / (sd * math.sqrt(2 * math.pi))
        return math.log(integrate.quad(f, 0, np.inf, epsabs=0, epsrel=1e-10, limit=400)[0])

    exact = sum(period(a, b) for a, b in zip(e[:100], h[:100]))
    closed = float(model.independent_loglik({k: jnp.asarray(v) for k, v in params.items()}, jnp.asarray(y[:100])))
    assert abs(closed - exact) < 1e-6
    full = float(model.independent_loglik({k: jnp.asarray(v) for k, v in params.items()}, jnp.asarray(y)))
    # EIS at rho = 0 on the same data; its NSE there is larger (measured 0.14 at T = 500: one
    # observation per factor value, no smoothing across periods)
    values, _ = eis_across_seeds(model, params, y)
    assert_eis_matches(values, full)


def test_lognormal_independent_case_against_quad(data):
    # adaptive Gauss-Hermite (base class) against quad over x of N(x) g_t(x)
    model, params = MODELS["lognormal"]
    params = {**params, "rho": 0.0}
    y = data["lognormal"][:100]
    _, e, h = gaussian_garch_loglik(params, y)
    s, gamma = params["s"], params["gamma"]
    c = np.sqrt(1 + gamma**2 * np.expm1(s**2))

    def period(e_t, h_t):
        def f(x):
            w = math.exp(s * x - s**2 / 2)
            sd = math.sqrt(h_t * w) / c
            return (math.exp(-0.5 * x * x) / math.sqrt(2 * math.pi)
                    * math.exp(-0.5 * ((e_t - math.sqrt(h_t) * gamma * (w - 1) / c) / sd) ** 2) / (sd * math.sqrt(2 * math.pi)))
        return math.log(integrate.quad(f, -12, 12, epsabs=0, epsrel=1e-10, limit=400)[0])

    exact = sum(period(a, b) for a, b in zip(e, h))
    agh = float(model.independent_loglik({k: jnp.asarray(v) for k, v in params.items()}, jnp.asarray(y)))
    assert abs(agh - exact) < 1e-6


def test_factor_switched_off_is_gaussian_garch(data):
    # lognormal link with s -> 0: W_t = 1 and the model is the Gaussian AR(1)-GARCH(1,1)
    y = data["lognormal"]
    params = {**LOGNORMAL, "s": 1e-7}
    gaussian, _, _ = gaussian_garch_loglik(params, y)
    eis_value = smle.loglik(MODELS["lognormal"][0], params, y, n_draws=N_DRAWS, seed=0, method="eis").value
    assert abs(eis_value - gaussian) < 1e-6
    # ig link: the NIG likelihood tends to the Gaussian one as lambda grows, the gap shrinking
    # like 1 / lambda (the NIG excess kurtosis is 3 (1 + 4 gamma^2 / (lambda + gamma^2)) / lambda)
    model = MODELS["ig"][0]
    gaps = []
    for shape in (1e2, 1e3, 9.9e3):
        p = {k: jnp.asarray(v) for k, v in {**IG, "lambda": shape, "rho": 0.0}.items()}
        gaps.append(abs(float(model.independent_loglik(p, jnp.asarray(y))) - gaussian))
    assert gaps[2] < gaps[1] / 5 < gaps[0] / 25
    assert gaps[2] < 0.05


def test_unconditional_variance_is_garch_value():
    # Bollerslev (1986): with i.i.d. innovations (rho = 0) E e_t^2 = omega / (1 - alpha - beta);
    # 16 replications of T = 20000, tolerance 4 standard errors of the mean across replications
    params = {**IG, "rho": 0.0}
    model = MODELS["ig"][0]
    target = params["omega"] / (1 - params["alpha"] - params["beta"])
    per_rep = []
    for rep in range(16):
        r, _ = smle.simulate(model, params, 20000, seed=500 + rep)
        e, _ = model.garch_path({k: jnp.asarray(v) for k, v in params.items()}, jnp.asarray(r))
        per_rep.append(float(jnp.mean(np.asarray(e)[100:] ** 2)))
    per_rep = np.array(per_rep)
    se = per_rep.std(ddof=1) / np.sqrt(per_rep.size)
    assert abs(per_rep.mean() - target) < 4 * se, (per_rep.mean(), target, se)


def test_fit_recovers_parameters_with_calibrated_intervals():
    # 2 replications at T = 2000 (16 intervals; each fit takes about 30-100 s here); Wald intervals from the delta-method standard errors (the
    # softmax couples alpha and beta, so a shift of one unconstrained coordinate is not a
    # marginal interval)
    model, truth = MODELS["ig"]
    misses = total = 0
    for rep in range(2):
        y, _ = smle.simulate(model, truth, 2000, seed=400 + rep)
        fit = smle.fit(model, y, n_draws=N_DRAWS, seed=rep, method="eis", exact_reference=False)
        assert fit.converged, fit.message
        for name, value in truth.items():
            misses += abs(fit.params[name] - value) > 1.96 * fit.std_errors[name]
            total += 1
    assert misses <= binomial_bound(total), (misses, total)


def test_real_to_natural_map_round_trips_and_respects_the_joint_constraint():
    model = MODELS["ig"][0]
    u = model.to_real(IG)
    back = model.from_real(u)
    assert all(abs(float(back[k]) - v) < 1e-12 for k, v in IG.items())
    rng = np.random.default_rng(0)
    for _ in range(200):
        p = model.from_real(jnp.asarray(rng.normal(0, 5, u.shape[0])))
        assert float(p["alpha"]) > 0 and float(p["beta"]) > 0 and float(p["alpha"] + p["beta"]) < 1


def test_nonstationary_garch_is_refused():
    model = MODELS["ig"][0]
    with pytest.raises(SmleInputError, match=r"alpha.*beta.*< 1"):
        model.check_joint({**IG, "alpha": 0.3, "beta": 0.7})
    y, _ = smle.simulate(model, IG, 500, seed=1)
    with pytest.raises(SmleInputError, match=r"alpha \+ beta < 1"):
        smle.fit(model, y, start={**IG, "alpha": 0.2, "beta": 0.85})


@pytest.mark.parametrize("name, value", [("lambda", 0.01), ("lambda", 1e4), ("lambda", 0.0), ("rho", 1.0),
                                         ("omega", 0.0), ("ar1", -1.0)])
def test_edge_of_the_region_is_refused(data, name, value):
    with pytest.raises(SmleInputError, match=rf"params\['{name}'\]"):
        smle.loglik(MODELS["ig"][0], {**IG, name: value}, data["ig"])


def test_bad_options_and_measures_are_refused(data):
    with pytest.raises(SmleInputError, match="link"):
        get_model("garch-mix", link="gamma")
    y = data["ig-realized"].copy()
    y[[7, 8], 1] = [0.0, -1.0]
    with pytest.raises(SmleInputError, match=r"realized measure.*row\(s\) 7, 8"):
        smle.loglik(MODELS["ig-realized"][0], REALIZED, y)
    with pytest.raises(SmleInputError, match=r"expects shape \(T, 2\)"):
        smle.loglik(MODELS["ig-realized"][0], REALIZED, y[:, 0])


def test_zero_returns_are_ordinary(data):
    y = data["ig"].copy()
    y[::5] = 0.0
    assert np.isfinite(smle.loglik(MODELS["ig"][0], IG, y, n_draws=N_DRAWS, seed=1, method="eis").value)


@settings(max_examples=15, deadline=None, derandomize=True)  # the same examples every run: CI is never flaky
@given(
    mu=st.floats(-0.5, 0.5), ar1=st.floats(-0.9, 0.9), omega=st.floats(1e-3, 1.0),
    persistence=st.floats(0.05, 0.995), share=st.floats(0.01, 0.6), gamma=st.floats(-2.0, 2.0),
    log_shape=st.floats(np.log(0.02), np.log(5e3)), rho=st.floats(-0.95, 0.995),
)
def test_no_nan_over_the_admissible_region(data, mu, ar1, omega, persistence, share, gamma, log_shape, rho):
    params = dict(mu=mu, ar1=ar1, omega=omega, alpha=persistence * share, beta=persistence * (1 - share),
                  gamma=gamma, rho=rho, **{"lambda": float(np.exp(log_shape))})
    assert np.isfinite(smle.loglik(MODELS["ig"][0], params, data["ig"], n_draws=N_DRAWS, seed=0, method="eis").value)
