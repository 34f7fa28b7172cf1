"""Checks of smle.distributions against outside references.

Every check names its outside source: SciPy's distributions and special functions, closed
forms from the papers written out again here, numerical quadrature (scipy.integrate.quad),
or central finite differences. Log-densities are compared with the criterion

    |ours - reference| <= tolerance * max(1, |reference|),

that is, to ``tolerance`` in the density's relative error where the log-density is of
order one, and to ``tolerance`` relative in the log itself where it is large and negative
(far tails, where float64 cannot hold the density's relative error to much better than
eps * |log density|).

All functions are jitted once at a fixed chunk length and reused, so the file compiles a
small, fixed number of programs.
"""

import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
import scipy.integrate
import scipy.special as special
import scipy.stats as stats
from hypothesis import given, settings
from hypothesis import strategies as st

import smle
from smle import distributions

assert smle.__version__  # importing smle enables float64

CHUNK = 1024


def evaluate(function, *args):
    """Apply a jitted elementwise function to broadcast arguments, in fixed-size chunks."""
    arrays = np.broadcast_arrays(*[np.asarray(a, dtype=float) for a in args])
    shape = arrays[0].shape
    flat = [a.ravel() for a in arrays]
    n = flat[0].size
    padded = -(-n // CHUNK) * CHUNK
    flat = [np.concatenate([f, np.full(padded - n, f[0])]) for f in flat]
    pieces = [function(*(f[i : i + CHUNK] for f in flat)) for i in range(0, padded, CHUNK)]
    joined = jax.tree.map(lambda *parts: np.concatenate([np.asarray(p) for p in parts]), *pieces)
    return jax.tree.map(lambda out: out[:n].reshape(shape), joined)


def log_error(ours, reference):
    """The largest |ours - reference| / max(1, |reference|)."""
    ours, reference = np.asarray(ours), np.asarray(reference)
    assert np.all(np.isfinite(ours)) and np.all(np.isfinite(reference))
    return float(np.max(np.abs(ours - reference) / np.maximum(1.0, np.abs(reference))))


def relative_error(ours, reference):
    ours, reference = np.asarray(ours), np.asarray(reference)
    assert np.all(np.isfinite(ours)) and np.all(np.isfinite(reference))
    return float(np.max(np.abs(ours / reference - 1.0)))


def gradients(function, n_args):
    """Jitted, vmapped gradient of a scalar function with respect to all its arguments."""
    return jax.jit(jax.vmap(jax.grad(function, argnums=tuple(range(n_args)))))


def central_difference(function, args, index, relative_step=1e-5):
    """Central finite difference of a NumPy function in argument ``index``."""
    args = [np.asarray(a, dtype=float) for a in np.broadcast_arrays(*args)]
    step = relative_step * np.maximum(1.0, np.abs(args[index]))
    up = list(args)
    down = list(args)
    up[index] = args[index] + step
    down[index] = args[index] - step
    return (function(*up) - function(*down)) / (2.0 * step)


# One compiled program per function, shared by all tests.
log_k0e = jax.jit(distributions.log_bessel_k0e)
log_k1e = jax.jit(distributions.log_bessel_k1e)
log_k1 = jax.jit(distributions.log_bessel_k1)
log_k1_derivatives = jax.jit(
    jax.vmap(lambda z: (jax.grad(distributions.log_bessel_k1)(z), jax.grad(jax.grad(distributions.log_bessel_k1))(z)))
)
log_k0_derivative = jax.jit(jax.vmap(jax.grad(distributions.log_bessel_k0)))
nig_log_density = jax.jit(distributions.nig_log_density)
nig_gradients = gradients(distributions.nig_log_density, 5)
nig_moments = jax.jit(distributions.nig_moments)


def _ig_bundle(x, mean, shape):
    """IG log-density, log-CDF, log-survival, CDF and the gradients of the logs, one point."""
    result = {"cdf": distributions.inverse_gaussian_cdf(x, mean, shape)}
    for name, function in [
        ("logpdf", distributions.inverse_gaussian_log_density),
        ("logcdf", distributions.inverse_gaussian_log_cdf),
        ("logsf", distributions.inverse_gaussian_log_sf),
    ]:
        result[name], result["d_" + name] = jax.value_and_grad(function, argnums=(0, 1, 2))(x, mean, shape)
    return result


ig_bundle = jax.jit(jax.vmap(_ig_bundle))


def ig_log_density(x, mean, shape):
    return ig_bundle(x, mean, shape)["logpdf"]


def ig_log_cdf(x, mean, shape):
    return ig_bundle(x, mean, shape)["logcdf"]


def ig_log_sf(x, mean, shape):
    return ig_bundle(x, mean, shape)["logsf"]


def ig_cdf(x, mean, shape):
    return ig_bundle(x, mean, shape)["cdf"]


def _quantile_bundle(p, x, mean, shape):
    """Both IG quantile functions with all first derivatives and d2Q/dshape2, one point."""
    quantile, (d_p, d_mean, d_shape) = jax.value_and_grad(distributions.inverse_gaussian_quantile, argnums=(0, 1, 2))(
        p, mean, shape
    )
    curvature = jax.grad(jax.grad(distributions.inverse_gaussian_quantile, argnums=2), argnums=2)(p, mean, shape)
    normal, (d_x, normal_d_mean, normal_d_shape) = jax.value_and_grad(
        distributions.normal_to_inverse_gaussian, argnums=(0, 1, 2)
    )(x, mean, shape)
    return dict(
        quantile=quantile, d_p=d_p, d_mean=d_mean, d_shape=d_shape, curvature=curvature,
        normal=normal, d_x=d_x, normal_d_mean=normal_d_mean, normal_d_shape=normal_d_shape,
    )


# The quantile functions are the costliest to compile, so all their uses share one program.
quantile_bundle = jax.jit(jax.vmap(_quantile_bundle))


def ig_quantile(p, mean, shape):
    return evaluate(quantile_bundle, p, 0.0, mean, shape)["quantile"]


def normal_to_ig(x, mean, shape):
    return evaluate(quantile_bundle, 0.5, x, mean, shape)["normal"]


t_log_density = jax.jit(distributions.student_t_log_density)
t_gradients = gradients(distributions.student_t_log_density, 4)
standard_t_log_density = jax.jit(distributions.standardized_student_t_log_density)
standard_t_gradients = gradients(distributions.standardized_student_t_log_density, 2)


def scipy_invgauss(mean, shape):
    """SciPy's inverse Gaussian with mean m and shape lambda: invgauss(mu=m/lambda, scale=lambda)."""
    return stats.invgauss(np.asarray(mean) / np.asarray(shape), scale=shape)


# --------------------------------------------------------------------------------------
# Bessel K0, K1
# --------------------------------------------------------------------------------------

BESSEL_GRID = np.unique(
    np.concatenate([np.geomspace(1e-10, 1e6, 3001), 1.0 + np.array([-1e-12, 0.0, 1e-12]), np.linspace(0.5, 3.0, 251)])
)


def test_log_bessel_scaled_match_scipy_k0e_k1e():
    # Outside source: scipy.special.k0e and k1e (exp(z) K_nu(z)). Criterion: relative error
    # of exp(ours) against them; measured 1.4e-15 (K0) and 3.8e-15 (K1).
    error_0 = relative_error(np.exp(evaluate(log_k0e, BESSEL_GRID) - np.log(special.k0e(BESSEL_GRID))), 1.0)
    error_1 = relative_error(np.exp(evaluate(log_k1e, BESSEL_GRID) - np.log(special.k1e(BESSEL_GRID))), 1.0)
    assert error_0 < 1e-13
    assert error_1 < 1e-13


def test_log_bessel_k1_matches_scipy_kve_and_kv():
    # Outside sources: scipy.special.kve(1, z) over the whole grid, and kv(1, z) where K1
    # does not underflow (z < 700). Criterion: |ours - log reference| / max(1, |log reference|).
    ours = evaluate(log_k1, BESSEL_GRID)
    assert log_error(ours, np.log(special.kve(1.0, BESSEL_GRID)) - BESSEL_GRID) < 1e-13
    finite = BESSEL_GRID < 700.0
    assert log_error(ours[finite], np.log(special.kv(1.0, BESSEL_GRID[finite]))) < 1e-13


def test_log_bessel_derivatives_match_recurrences():
    # Outside source: d/dz log K1 = -K0/K1 - 1/z and d/dz log K0 = -K1/K0 (Abramowitz and
    # Stegun 9.6.27), and by differentiating once more
    # d2/dz2 log K1 = 1 - (K0/K1)^2 - (K0/K1)/z + 1/z^2, with K0, K1 from scipy.special
    # k0e/k1e. The second derivative is compared with an absolute floor of 1e-14, since for
    # large z it is ~1/(2 z^2) and the closed form itself cancels to about eps.
    z = BESSEL_GRID[BESSEL_GRID < 1e5]
    first, second = evaluate(log_k1_derivatives, z)
    ratio = special.k0e(z) / special.k1e(z)
    assert relative_error(first, -ratio - 1.0 / z) < 1e-13
    assert relative_error(evaluate(log_k0_derivative, z), -special.k1e(z) / special.k0e(z)) < 1e-13
    closed_form = 1.0 - ratio**2 - ratio / z + 1.0 / z**2
    assert np.all(np.abs(second - closed_form) <= 1e-11 * np.abs(closed_form) + 1e-14)


# --------------------------------------------------------------------------------------
# Normal inverse Gaussian
# --------------------------------------------------------------------------------------


def nig_grid():
    """(x, alpha, beta, mu, delta) over a wide parameter grid and far into both tails."""
    alpha, beta_ratio, mu, delta, standard = np.meshgrid(
        [0.3, 1.0, 4.0, 25.0],
        [-0.97, -0.5, 0.0, 0.4, 0.9],
        [-1.5, 0.7],
        [0.05, 1.0, 6.0],
        np.concatenate([-np.geomspace(1e-3, 400.0, 25), [0.0], np.geomspace(1e-3, 400.0, 25)]),
        indexing="ij",
    )
    x = mu + delta * standard
    return x.ravel(), alpha.ravel(), (beta_ratio * alpha).ravel(), mu.ravel(), delta.ravel()


def nig_log_density_from_scipy_parts(x, alpha, beta, mu, delta):
    """log of SciPy's norminvgauss density, in log form so that far tails do not underflow.

    SciPy's density (a = alpha delta, b = beta delta, standardised y = (x - mu) / delta) is
    a / pi * k1e(a sqrt(1 + y^2)) exp(b y - a sqrt(1 + y^2) + sqrt(a^2 - b^2)) / sqrt(1 + y^2)
    / delta; its logarithm is written out here with scipy.special.k1e.
    """
    a, b, y = alpha * delta, beta * delta, (x - mu) / delta
    root = np.hypot(1.0, y)
    return (
        np.log(a / np.pi) + np.log(special.k1e(a * root)) + b * y - a * root + np.sqrt(a**2 - b**2) - np.log(root)
    ) - np.log(delta)


def test_nig_log_density_matches_scipy_norminvgauss():
    # Outside source: scipy.stats.norminvgauss(a=alpha delta, b=beta delta, loc=mu,
    # scale=delta).logpdf where its density does not underflow, and SciPy's density formula
    # in log form (with scipy.special.k1e) everywhere. Measured: below 1e-13.
    x, alpha, beta, mu, delta = nig_grid()
    ours = evaluate(nig_log_density, x, alpha, beta, mu, delta)
    scipy_logpdf = stats.norminvgauss.logpdf(x, alpha * delta, beta * delta, loc=mu, scale=delta)
    representable = scipy_logpdf > -700.0
    assert representable.sum() > 0.5 * x.size
    assert log_error(ours[representable], scipy_logpdf[representable]) < 1e-10
    assert log_error(ours, nig_log_density_from_scipy_parts(x, alpha, beta, mu, delta)) < 1e-10
    assert ours.min() < -1000.0  # the grid reaches far tails


def test_nig_density_integrates_to_one_with_the_stated_mean():
    # Outside source: adaptive quadrature (scipy.integrate.quad) of exp(ours).
    for alpha, beta, mu, delta in [(1.0, 0.0, 0.0, 1.0), (3.0, -2.0, 0.5, 0.4), (0.6, 0.5, -1.0, 2.0)]:
        def density(x):
            return float(np.exp(nig_log_density(x, alpha, beta, mu, delta)))

        mass = scipy.integrate.quad(density, -np.inf, np.inf, epsabs=1e-13, epsrel=1e-12, limit=400)[0]
        first = scipy.integrate.quad(lambda x: x * density(x), -np.inf, np.inf, epsabs=1e-13, epsrel=1e-12, limit=400)[0]
        assert abs(mass - 1.0) < 1e-9
        assert abs(first - float(nig_moments(alpha, beta, mu, delta).mean)) < 1e-8


def nig_moments_from_mixture_cumulants(alpha, beta, mu, delta):
    """Mean, variance, skewness, excess kurtosis from the normal variance-mean mixture.

    Barndorff-Nielsen (1997): X = mu + beta W + sqrt(W) e, W ~ IG(mean delta/gamma, shape
    delta^2), so the cumulant generating function is mu t + K_W(beta t + t^2/2). With the IG
    cumulants k1 = m, k2 = m^3/l, k3 = 3 m^5/l^2, k4 = 15 m^7/l^3 this gives
    kappa1 = mu + beta k1, kappa2 = k1 + beta^2 k2, kappa3 = 3 beta k2 + beta^3 k3,
    kappa4 = 3 k2 + 6 beta^2 k3 + beta^4 k4.
    """
    gamma = np.sqrt(alpha**2 - beta**2)
    m, shape = delta / gamma, delta**2
    k1, k2, k3, k4 = m, m**3 / shape, 3 * m**5 / shape**2, 15 * m**7 / shape**3
    kappa2 = k1 + beta**2 * k2
    kappa3 = 3 * beta * k2 + beta**3 * k3
    kappa4 = 3 * k2 + 6 * beta**2 * k3 + beta**4 * k4
    return mu + beta * k1, kappa2, kappa3 / kappa2**1.5, kappa4 / kappa2**2


def test_nig_moments_match_mixture_cumulants_and_scipy():
    # Outside sources: the cumulants of the normal variance-mean mixture (above), and
    # scipy.stats.norminvgauss.stats(moments='mvsk'). Criterion: relative error, with an
    # absolute floor for quantities that are zero (symmetric laws).
    _, alpha, beta, mu, delta = (v[::51] for v in nig_grid())
    ours = evaluate(lambda *a: tuple(nig_moments(*a)), alpha, beta, mu, delta)
    mixture = nig_moments_from_mixture_cumulants(alpha, beta, mu, delta)
    from_scipy = stats.norminvgauss.stats(alpha * delta, beta * delta, loc=mu, scale=delta, moments="mvsk")
    for name, value, by_mixture, by_scipy in zip(distributions.NigMoments._fields, ours, mixture, from_scipy):
        scale = np.maximum(np.abs(by_mixture), 1e-300)
        assert np.max(np.abs(value - by_mixture) / np.maximum(scale, 1e-12)) < 1e-12, name
        assert np.max(np.abs(value - by_scipy) / np.maximum(scale, 1e-12)) < 1e-12, name


def test_nig_gradients_match_finite_differences_of_scipy():
    # Outside source: central differences of SciPy's NIG log-density (log form above).
    # Criterion: |autodiff - fd| <= 1e-6 * max(1, |fd|).
    x, alpha, beta, mu, delta = (v[::7] for v in nig_grid())
    keep = np.abs(x - mu) < 50.0 * delta  # where the finite difference is itself accurate
    args = [v[keep] for v in (x, alpha, beta, mu, delta)]
    ours = evaluate(nig_gradients, *args)
    for index, name in enumerate(["x", "alpha", "beta", "mu", "delta"]):
        reference = central_difference(nig_log_density_from_scipy_parts, args, index, relative_step=1e-6)
        assert log_error(ours[index], reference) < 1e-6, name


# --------------------------------------------------------------------------------------
# Inverse Gaussian
# --------------------------------------------------------------------------------------

IG_MEANS = np.array([0.5, 1.0, 3.0])
IG_SHAPE_RATIOS = np.array([0.05, 0.3, 1.0, 5.0, 100.0, 1000.0])  # lambda / mean
LEVELS = np.concatenate([np.geomspace(1e-15, 0.5, 60), 1.0 - np.geomspace(1e-15, 0.5, 60)[::-1][1:]])


def ig_level_grid():
    """(p, mean, shape) over levels 1e-15 .. 1 - 1e-15 and the shape range of interest."""
    p, mean, ratio = np.meshgrid(LEVELS, IG_MEANS, IG_SHAPE_RATIOS, indexing="ij")
    return p.ravel(), mean.ravel(), (mean * ratio).ravel()


def test_scipy_invgauss_mapping_has_mean_and_shape():
    # Outside source: the IG density of Chhikara and Folks (1989, eq. 2.1), written here,
    # and scipy's own moments: invgauss(mu=m/lambda, scale=lambda) has mean m and variance
    # m^3 / lambda and the IG(m, lambda) density.
    for mean, shape in [(1.0, 0.05), (0.5, 2.0), (3.0, 700.0)]:
        law = scipy_invgauss(mean, shape)
        assert law.mean() == pytest.approx(mean, rel=1e-13)
        assert law.var() == pytest.approx(mean**3 / shape, rel=1e-13)
        x = law.ppf([0.01, 0.3, 0.5, 0.9, 0.999])
        formula = np.sqrt(shape / (2 * np.pi * x**3)) * np.exp(-shape * (x - mean) ** 2 / (2 * mean**2 * x))
        np.testing.assert_allclose(law.pdf(x), formula, rtol=1e-13)


def test_ig_log_density_matches_scipy():
    # Outside source: scipy.stats.invgauss(mu=m/lambda, scale=lambda).logpdf, at its own
    # quantiles 1e-15 .. 1 - 1e-15 and beyond (x from 1e-3 to 1e3 times the mean).
    p, mean, shape = ig_level_grid()
    x = np.concatenate([scipy_invgauss(mean, shape).ppf(p), mean * np.geomspace(1e-3, 1e3, p.size)])
    mean, shape = np.tile(mean, 2), np.tile(shape, 2)
    reference = scipy_invgauss(mean, shape).logpdf(x)
    assert log_error(evaluate(ig_log_density, x, mean, shape), reference) < 1e-12


def test_ig_log_cdf_and_log_sf_match_scipy():
    # Outside source: scipy.stats.invgauss logcdf and logsf at scipy's quantiles of levels
    # 1e-15 .. 1 - 1e-15. Criterion: |ours - ref| / max(1, |ref|) < 1e-10, which is a
    # relative error below 1e-10 in the probabilities themselves.
    p, mean, shape = ig_level_grid()
    law = scipy_invgauss(mean, shape)
    x = law.ppf(p)
    assert log_error(evaluate(ig_log_cdf, x, mean, shape), law.logcdf(x)) < 1e-10
    assert log_error(evaluate(ig_log_sf, x, mean, shape), law.logsf(x)) < 1e-10
    lower = p < 0.5
    cdf = evaluate(ig_cdf, x, mean, shape)
    scipy_cdf = stats.invgauss.cdf(x, mean / shape, scale=shape)
    assert relative_error(cdf[lower], scipy_cdf[lower]) < 1e-10
    assert np.max(np.abs(cdf - scipy_cdf)) < 1e-14


def test_ig_quantile_inverts_the_cdf():
    # Self-consistency: the CDF at the quantile returns the level, as a relative error in
    # the smaller tail probability (F for p < 1/2, 1 - F otherwise).
    p, mean, shape = ig_level_grid()
    quantile = ig_quantile(p, mean, shape)
    assert np.all(quantile > 0.0)
    lower = p < 0.5
    log_cdf = evaluate(ig_log_cdf, quantile, mean, shape)
    log_sf = evaluate(ig_log_sf, quantile, mean, shape)
    residual = np.where(lower, log_cdf - np.log(p), log_sf - np.log1p(-p))
    assert np.max(np.abs(residual)) < 1e-11


def test_ig_quantile_matches_scipy():
    # Outside sources: scipy.stats.invgauss logcdf / logsf evaluated at our quantile must
    # return the level (criterion |log F(Q) - log p| <= 1e-10 max(1, |log p|), in the
    # smaller tail); and scipy's ppf (p < 1/2) / isf(1 - p) (Boost's inverse) to 1e-10
    # relative, at every level where scipy's inverse passes its own round trip to 1e-12.
    # (It does not everywhere: for IG(3, 3000) at 1 - 1e-15 its isf is 1.3e-4 low, and
    # scipy's own logsf there misses the level by 0.03.)
    p, mean, shape = ig_level_grid()
    law = scipy_invgauss(mean, shape)
    quantile = ig_quantile(p, mean, shape)
    level = np.where(p < 0.5, np.log(p), np.log1p(-p))
    assert log_error(np.where(p < 0.5, law.logcdf(quantile), law.logsf(quantile)), level) < 1e-10
    reference = np.where(p < 0.5, law.ppf(p), law.isf(1.0 - p))
    trusted = np.abs(np.where(p < 0.5, law.logcdf(reference), law.logsf(reference)) - level) < 1e-12
    assert trusted.mean() > 0.8  # measured 0.86 and 0.89
    assert relative_error(quantile[trusted], reference[trusted]) < 1e-10


def test_normal_to_ig_matches_scipy_and_reaches_far_tails():
    # Outside sources: scipy's invgauss logcdf at W(x) against scipy.special.log_ndtr(x)
    # (logsf against log_ndtr(-x) for x >= 0), for |x| <= 8; and scipy's ppf(ndtr(x)) /
    # isf(ndtr(-x)) to 1e-10 relative where scipy's inverse round-trips to 1e-12. Beyond
    # |x| = 8 (to 37) the level is checked with our own log CDF against log_ndtr.
    x, mean, ratio = np.meshgrid(np.linspace(-8.0, 8.0, 161), IG_MEANS, IG_SHAPE_RATIOS, indexing="ij")
    x, mean, shape = x.ravel(), mean.ravel(), (mean * ratio).ravel()
    law = scipy_invgauss(mean, shape)
    value = normal_to_ig(x, mean, shape)
    level = special.log_ndtr(-np.abs(x))
    assert log_error(np.where(x < 0, law.logcdf(value), law.logsf(value)), level) < 1e-10
    reference = np.where(x < 0, law.ppf(special.ndtr(x)), law.isf(special.ndtr(-x)))
    trusted = np.abs(np.where(x < 0, law.logcdf(reference), law.logsf(reference)) - level) < 1e-12
    assert trusted.mean() > 0.8  # measured 0.86 and 0.89
    assert relative_error(value[trusted], reference[trusted]) < 1e-10
    assert np.all(np.diff(value.reshape(161, -1), axis=0) > 0.0)

    far, mean, ratio = np.meshgrid(
        np.concatenate([np.linspace(-37.0, -8.0, 30), np.linspace(8.0, 37.0, 30)]),
        IG_MEANS,
        IG_SHAPE_RATIOS,
        indexing="ij",
    )
    far, mean, shape = far.ravel(), mean.ravel(), (mean * ratio).ravel()
    value = normal_to_ig(far, mean, shape)
    assert np.all(np.isfinite(value)) and np.all(value > 0.0)
    level = special.log_ndtr(-np.abs(far))
    ours = np.where(far < 0, evaluate(ig_log_cdf, value, mean, shape), evaluate(ig_log_sf, value, mean, shape))
    assert log_error(ours, level) < 1e-12


def test_ig_quantile_gradients():
    # Outside sources: dQ/dp = 1 / pdf(Q) with scipy's pdf; dW/dx = phi(x) / f(W) with
    # scipy's norm.pdf and invgauss.pdf; dQ/dmean and dQ/dshape (for both quantile
    # functions) against central differences of scipy's ppf / isf; d2Q/dshape2 against
    # central differences of our exact first derivative.
    p, mean, shape = (v[::3] for v in ig_level_grid())
    central = (p > 1e-12) & (p < 1 - 1e-12)  # where scipy's inverse is smooth enough to difference
    p, mean, shape = p[central], mean[central], shape[central]
    x = special.ndtri(p)
    bundle = evaluate(quantile_bundle, p, x, mean, shape)
    quantile = bundle["quantile"]
    assert relative_error(bundle["d_p"], 1.0 / scipy_invgauss(mean, shape).pdf(quantile)) < 1e-10
    d_x_reference = stats.norm.pdf(x) / scipy_invgauss(mean, shape).pdf(bundle["normal"])
    assert relative_error(bundle["d_x"], d_x_reference) < 1e-9

    def scipy_quantile(p, mean, shape):
        law = scipy_invgauss(mean, shape)
        return np.where(p < 0.5, law.ppf(p), law.isf(1.0 - p))

    for index, name in [(1, "mean"), (2, "shape")]:
        reference = central_difference(scipy_quantile, [p, mean, shape], index, relative_step=1e-5)
        floor = 1e-3 * quantile / np.maximum(1.0, [mean, shape][index - 1])
        for ours in (bundle["d_" + name], bundle["normal_d_" + name]):
            assert np.max(np.abs(ours - reference) / np.maximum(np.abs(reference), floor)) < 1e-6, name

    step = 1e-5 * shape
    upper = evaluate(quantile_bundle, p, x, mean, shape + step)["d_shape"]
    lower = evaluate(quantile_bundle, p, x, mean, shape - step)["d_shape"]
    difference = (upper - lower) / (2 * step)
    curvature = bundle["curvature"]
    assert np.all(np.isfinite(curvature))
    assert np.max(np.abs(curvature - difference) / np.maximum(np.abs(difference), 1e-3 * quantile / shape**2)) < 1e-5


def test_ig_log_density_and_cdf_gradients_match_finite_differences_of_scipy():
    # Outside source: central differences of scipy.stats.invgauss logpdf, logcdf and logsf.
    p, mean, shape = (v[::2] for v in ig_level_grid())
    central = (p > 1e-10) & (p < 1 - 1e-10)
    p, mean, shape = p[central], mean[central], shape[central]
    x = scipy_invgauss(mean, shape).ppf(p)
    bundle = evaluate(ig_bundle, x, mean, shape)
    for name in ["logpdf", "logcdf", "logsf"]:
        ours = bundle["d_" + name]

        def reference_function(x, mean, shape, name=name):
            return getattr(scipy_invgauss(mean, shape), name)(x)

        for index in range(3):
            reference = central_difference(reference_function, [x, mean, shape], index, relative_step=1e-6)
            assert log_error(ours[index], reference) < 1e-5, (name, index)


# --------------------------------------------------------------------------------------
# Student t
# --------------------------------------------------------------------------------------

T_NUS = np.array([0.3, 1.0, 2.5, 5.0, 30.0, 49.9, 50.1, 200.0, 1e4, 1e6])


def t_grid():
    x, loc, scale, nu = np.meshgrid(
        np.concatenate([-np.geomspace(1e-3, 1e6, 40), [0.0], np.geomspace(1e-3, 1e6, 40)]),
        [-2.0, 0.3],
        [0.01, 1.0, 40.0],
        T_NUS,
        indexing="ij",
    )
    return (loc + scale * x).ravel(), loc.ravel(), scale.ravel(), nu.ravel()


def test_student_t_log_density_matches_scipy():
    # Outside source: scipy.stats.t.logpdf(x, df=nu, loc, scale), including nu from 0.3 to
    # 1e6 and points a million scales away.
    x, loc, scale, nu = t_grid()
    # Measured 2e-12, all of it at nu = 1e4, where SciPy's normaliser (scipy.special.poch)
    # is itself off by 2e-12 (see the exact check below).
    reference = stats.t.logpdf(x, nu, loc=loc, scale=scale)
    assert log_error(evaluate(t_log_density, x, loc, scale, nu), reference) < 1e-10


def test_student_t_normaliser_against_exact_integer_arithmetic():
    # Outside source: exact integers. For whole n, Gamma(n + 1/2) / Gamma(n) =
    # sqrt(pi) (2n)! / (4^n n! (n-1)!); the ratio is formed exactly (scaled by 10^40) and
    # only then logged, so the reference is good to ~1e-14 at any n. The normaliser is
    # read off the log-density at x = loc with scale 1: log ratio - log(nu pi)/2.
    ns = [1, 2, 3, 7, 12, 24, 25, 26, 40, 100, 1000, 5000, 50000]
    exact = []
    for n in ns:
        scaled = (math.factorial(2 * n) * 10**40) // (4**n * math.factorial(n) * math.factorial(n - 1))
        exact.append(math.log(scaled) - 40 * math.log(10) + 0.5 * math.log(math.pi))
    nu = 2.0 * np.array(ns)
    ours = evaluate(t_log_density, 0.0, 0.0, 1.0, nu) + 0.5 * np.log(nu * np.pi)
    assert np.max(np.abs(ours - np.array(exact))) < 1e-13


def test_standardized_student_t_has_unit_variance_and_matches_scipy():
    # Outside sources: scipy.stats.t.logpdf with scale sqrt((nu-2)/nu), and quadrature of
    # x^2 times the density (scipy.integrate.quad).
    x, _, _, nu = t_grid()
    keep = nu > 2
    x, nu = x[keep], nu[keep]
    reference = stats.t.logpdf(x, nu, scale=np.sqrt((nu - 2) / nu))
    assert log_error(evaluate(standard_t_log_density, x, nu), reference) < 1e-10
    for value in [2.5, 5.0, 30.0]:
        variance = scipy.integrate.quad(
            lambda y: y * y * float(np.exp(standard_t_log_density(y, value))), -np.inf, np.inf, limit=400
        )[0]
        assert variance == pytest.approx(1.0, rel=1e-7)


def test_student_t_gradients_match_finite_differences_of_scipy():
    # Outside source: central differences of scipy.stats.t.logpdf in x, loc, scale and nu.
    x, loc, scale, nu = (v[::3] for v in t_grid())
    keep = (np.abs(x - loc) < 1e3 * scale) & (nu < 1e5)
    args = [v[keep] for v in (x, loc, scale, nu)]
    ours = evaluate(t_gradients, *args)

    def reference(x, loc, scale, nu):
        return stats.t.logpdf(x, nu, loc=loc, scale=scale)

    for index, name in enumerate(["x", "loc", "scale", "nu"]):
        fd = central_difference(reference, args, index, relative_step=1e-6)
        assert log_error(ours[index], fd) < 1e-5, name
    standard = evaluate(standard_t_gradients, args[0][args[3] > 2], args[3][args[3] > 2])

    def standard_reference(x, nu):
        return stats.t.logpdf(x, nu, scale=np.sqrt((nu - 2) / nu))

    for index in range(2):
        fd = central_difference(standard_reference, [args[0][args[3] > 2], args[3][args[3] > 2]], index, 1e-6)
        assert log_error(standard[index], fd) < 1e-5


# --------------------------------------------------------------------------------------
# Properties over the admissible regions
# --------------------------------------------------------------------------------------


def _log_uniform(low, high):
    return st.floats(math.log(low), math.log(high)).map(math.exp)


def _all_finite(tree):
    return all(bool(jnp.all(jnp.isfinite(leaf))) for leaf in jax.tree.leaves(tree))




@settings(max_examples=80, deadline=None, derandomize=True)  # the same examples every run: CI is never flaky
@given(
    x=st.floats(-1e4, 1e4),
    alpha=_log_uniform(1e-2, 1e3),
    beta_ratio=st.floats(-0.999, 0.999),
    mu=st.floats(-100.0, 100.0),
    delta=_log_uniform(1e-3, 1e2),
    nu=_log_uniform(0.05, 1e8),
    z=_log_uniform(1e-12, 1e7),
)
def test_log_densities_finite_over_admissible_region(x, alpha, beta_ratio, mu, delta, nu, z):
    # The programs compiled for the grid tests are reused, on one-point arrays.
    nig_args = ([x], [alpha], [beta_ratio * alpha], [mu], [delta])
    assert _all_finite((evaluate(nig_log_density, *nig_args), evaluate(nig_gradients, *nig_args)))
    t_args = ([x], [mu], [delta], [nu])
    assert _all_finite((evaluate(t_log_density, *t_args), evaluate(t_gradients, *t_args)))
    assert _all_finite((evaluate(log_k1, [z]), evaluate(log_k1_derivatives, [z])))


@settings(max_examples=80, deadline=None, derandomize=True)  # the same examples every run: CI is never flaky
@given(
    p=st.floats(1e-15, 1.0 - 1e-15),
    x=st.floats(-8.0, 8.0),
    mean=_log_uniform(0.1, 10.0),
    ratio=_log_uniform(0.05, 1000.0),
)
def test_ig_quantiles_finite_and_consistent_over_admissible_region(p, x, mean, ratio):
    bundle = {key: value[0] for key, value in evaluate(quantile_bundle, [p], [x], [mean], [ratio * mean]).items()}
    assert _all_finite(bundle)
    assert bundle["quantile"] > 0.0 and bundle["d_p"] > 0.0
    assert bundle["normal"] > 0.0 and bundle["d_x"] > 0.0
    cdf = evaluate(ig_bundle, [bundle["quantile"]], [mean], [ratio * mean])["cdf"][0]
    assert cdf == pytest.approx(p, rel=1e-11)
