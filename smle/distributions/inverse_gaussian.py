"""The inverse Gaussian (IG) law in the (mean, shape) parameterisation: log-density, log-CDF,
log-survival function, CDF and quantile with exact derivatives (Chhikara and Folks 1989)."""

from __future__ import annotations

import math

import jax
import jax.numpy as jnp
from jax.scipy.special import ndtri

from smle.distributions.normal import _ERFCX_SWITCH, _erfcx, _erfcx_fraction_tail, _log_normal_cdf, _log_one_minus_exp

_LOG_2PI = math.log(2.0 * math.pi)
_SQRT_HALF = math.sqrt(0.5)


# ---------------------------------------------------------------------------------------
# Inverse Gaussian
# ---------------------------------------------------------------------------------------


def _unit_log_density(w, shape):
    """Log-density of IG(mean 1, shape) at w > 0."""
    return 0.5 * (jnp.log(shape) - _LOG_2PI) - 1.5 * jnp.log(w) - 0.5 * shape * (w - 1.0) ** 2 / w


def _unit_log_cdf_and_sf(w, shape):
    """(log CDF, log survival) of IG(mean 1, shape) at w > 0.

    With r = sqrt(shape / w), a = r (w - 1) and b = r (w + 1) the CDF is
    Phi(a) + exp(2 shape) Phi(-b) (Chhikara and Folks 1989, eq. 2.4). Because
    b^2 - a^2 = 4 shape, both terms share the factor exp(-a^2/2):
      exp(2 shape) Phi(-b) = exp(-a^2/2) erfcx(b/sqrt2) / 2,
      Phi(-|a|)            = exp(-a^2/2) erfcx(|a|/sqrt2) / 2,
    so the smaller tail is exp(-a^2/2) (erfcx(|a|/sqrt2) +- erfcx(b/sqrt2)) / 2 (plus for
    the lower tail, a <= 0; minus for the upper tail, a > 0), free of overflow and of the
    exp(2 shape) factor, and the other probability is one minus it.
    """
    root = jnp.sqrt(shape / w)
    a = root * (w - 1.0)
    b = root * (w + 1.0)
    half_a_squared = 0.5 * shape * (w - 1.0) ** 2 / w
    u = jnp.abs(a) * _SQRT_HALF
    v = b * _SQRT_HALF
    scaled_a = _erfcx(u)
    scaled_b = _erfcx(v)
    upper = a > 0.0
    # Far in the upper tail erfcx(u) - erfcx(v) cancels (v / u -> 1). There both are
    # continued fractions, and their difference is formed from v - u = sqrt(2) root:
    # sqrt(pi) (erfcx(u) - erfcx(v)) = (v - u + T(v) - T(u)) / ((u + T(u)) (v + T(v))).
    far = u >= _ERFCX_SWITCH
    u_far = jnp.maximum(u, _ERFCX_SWITCH)
    v_far = jnp.maximum(v, _ERFCX_SWITCH)
    tail_u = _erfcx_fraction_tail(u_far)
    tail_v = _erfcx_fraction_tail(v_far)
    difference_far = (math.sqrt(2.0) * root + tail_v - tail_u) / (
        math.sqrt(math.pi) * (u_far + tail_u) * (v_far + tail_v)
    )
    difference = jnp.where(far, difference_far, scaled_a - scaled_b)
    # erfcx is decreasing and v > u, so the difference is positive.
    log_tail = jnp.log(0.5 * jnp.where(upper, difference, scaled_a + scaled_b)) - half_a_squared
    log_rest = _log_one_minus_exp(log_tail)
    return jnp.where(upper, log_rest, log_tail), jnp.where(upper, log_tail, log_rest)


def inverse_gaussian_log_density(x, mean, shape):
    """Log-density of the inverse Gaussian law IG(mean, shape).

      f(x) = sqrt(shape / (2 pi x^3)) exp(-shape (x - mean)^2 / (2 mean^2 x)),  x > 0,

    with mean m and variance m^3 / shape (Chhikara and Folks 1989, eq. 2.1).

    Args:
      x: point(s), x > 0.
      mean: mean m > 0, units of x.
      shape: shape lambda > 0, units of x.

    Returns:
      log f(x), broadcast over the arguments.
    """
    x, mean, shape = (jnp.asarray(v, dtype=float) for v in (x, mean, shape))
    return _unit_log_density(x / mean, shape / mean) - jnp.log(mean)


def inverse_gaussian_log_cdf(x, mean, shape):
    """log P(X <= x) for X ~ IG(mean, shape); accurate far into the lower tail.

    Args: as for :func:`inverse_gaussian_log_density` (x, mean, shape > 0).

    References: Chhikara and Folks (1989), eq. (2.4), evaluated in the scaled form described
    in the module's ``_unit_log_cdf_and_sf``.
    """
    x, mean, shape = (jnp.asarray(v, dtype=float) for v in (x, mean, shape))
    return _unit_log_cdf_and_sf(x / mean, shape / mean)[0]


def inverse_gaussian_log_sf(x, mean, shape):
    """log P(X > x) for X ~ IG(mean, shape); accurate far into the upper tail.

    Args: as for :func:`inverse_gaussian_log_density` (x, mean, shape > 0).
    """
    x, mean, shape = (jnp.asarray(v, dtype=float) for v in (x, mean, shape))
    return _unit_log_cdf_and_sf(x / mean, shape / mean)[1]


def inverse_gaussian_cdf(x, mean, shape):
    """P(X <= x) for X ~ IG(mean, shape), with full relative accuracy for small values.

    Args: as for :func:`inverse_gaussian_log_density` (x, mean, shape > 0).
    """
    log_cdf = inverse_gaussian_log_cdf(x, mean, shape)
    log_sf = inverse_gaussian_log_sf(x, mean, shape)
    return jnp.where(log_cdf < log_sf, jnp.exp(log_cdf), -jnp.expm1(log_sf))


# Newton steps after the starting value; the solver converges in at most 6 on the
# documented range, the rest are margin (a converged step changes nothing).
_QUANTILE_NEWTON_STEPS = 10
# Targets below this log-probability are clipped (exp(-700) is still a normal float).
_SMALLEST_LOG_PROBABILITY = -700.0


def _unit_quantile_start(log_lower, log_upper, shape):
    """A starting value for the IG(1, shape) quantile, on the correct side of the root.

    The CDF is Phi(a) (1 + rho) with 0 <= rho <= 1 below the mean (rho is a ratio of Mills
    ratios), so solving a(w) = Phi^{-1}(p/2) gives F(w) <= p for p < 1/2; above the mean
    the survival function is at most Phi(-a), so a(w) = -Phi^{-1}(1 - p) gives S(w) <= 1 - p.
    a(w) = sqrt(shape) (w - 1) / sqrt(w) = z is a quadratic in sqrt(w).
    """
    lower = log_lower < log_upper
    log_lower = jnp.maximum(log_lower, _SMALLEST_LOG_PROBABILITY)
    log_upper = jnp.maximum(log_upper, _SMALLEST_LOG_PROBABILITY)
    z_lower = ndtri(0.5 * jnp.exp(jnp.minimum(log_lower, math.log(0.5))))
    z_upper = -ndtri(jnp.exp(jnp.minimum(log_upper, math.log(0.5))))
    c = jnp.where(lower, z_lower, z_upper) / jnp.sqrt(shape)
    root = jnp.sqrt(c * c + 4.0)
    # sqrt(w) = (c + sqrt(c^2 + 4)) / 2, written without cancellation for c < 0.
    sqrt_w = jnp.where(c < 0.0, 2.0 / (root - c), 0.5 * (c + root))
    return sqrt_w * sqrt_w


@jax.custom_jvp
def _unit_quantile(log_lower, log_upper, shape):
    """The w with log F(w) = log_lower (if smaller) or log S(w) = log_upper, IG(1, shape).

    Newton's method in v = log w. The density of log W is log-concave, hence so are its CDF
    and survival function; on log F (increasing, concave) from a start left of the root,
    and on log S (decreasing, concave) from a start right of it, Newton's iterates move
    monotonically to the root without overshooting.
    """
    lower = log_lower < log_upper
    target_lower = jnp.maximum(log_lower, _SMALLEST_LOG_PROBABILITY)
    target_upper = jnp.maximum(log_upper, _SMALLEST_LOG_PROBABILITY)
    log_w = jnp.log(_unit_quantile_start(log_lower, log_upper, shape))

    def newton_step(_, log_w):
        w = jnp.exp(log_w)
        log_cdf, log_sf = _unit_log_cdf_and_sf(w, shape)
        log_pdf_w = _unit_log_density(w, shape) + log_w  # log of the density of log W
        step_lower = (log_cdf - target_lower) * jnp.exp(log_cdf - log_pdf_w)
        step_upper = -(log_sf - target_upper) * jnp.exp(log_sf - log_pdf_w)
        return log_w - jnp.where(lower, step_lower, step_upper)

    log_w = jax.lax.fori_loop(0, _QUANTILE_NEWTON_STEPS, newton_step, log_w)
    return jnp.exp(log_w)


@_unit_quantile.defjvp
def _unit_quantile_jvp(primals, tangents):
    # Implicit function theorem on log F(w, shape) = log_lower (or log S = log_upper):
    # dw = (d target - d/dshape log F * d shape) / (d/dw log F).
    log_lower, log_upper, shape = primals
    d_log_lower, d_log_upper, d_shape = tangents
    w = _unit_quantile(log_lower, log_upper, shape)
    (log_cdf, log_sf), (d_log_cdf_shape, d_log_sf_shape) = jax.jvp(
        lambda s: _unit_log_cdf_and_sf(w, s), (shape,), (d_shape,)
    )
    log_pdf = _unit_log_density(w, shape)
    d_w_lower = (d_log_lower - d_log_cdf_shape) * jnp.exp(log_cdf - log_pdf)
    d_w_upper = -(d_log_upper - d_log_sf_shape) * jnp.exp(log_sf - log_pdf)
    return w, jnp.where(log_lower < log_upper, d_w_lower, d_w_upper)


def inverse_gaussian_quantile(p, mean, shape):
    """The p-quantile of IG(mean, shape): the x > 0 with P(X <= x) = p.

    Newton's method in log x from a closed-form start, a fixed number of steps (so it jits
    to a fixed program), on log P(X <= x) for p < 1/2 and on log P(X > x) otherwise. The
    derivative is exact, by the implicit function theorem: dx/dp = 1 / f(x) and
    dx/dtheta = -(dF/dtheta)(x) / f(x) for theta in (mean, shape).

    Args:
      p: probability level(s), 0 < p < 1; relative accuracy about 1e-14 for
        1e-300 < p <= 1 - 1e-16 (1 - p is formed in float64, so for p near one prefer
        :func:`normal_to_inverse_gaussian`).
      mean: mean m > 0.
      shape: shape lambda > 0; tested for 0.01 <= lambda / m <= 1e4.

    Returns:
      The quantile, in units of the mean, broadcast over the arguments.

    References: Chhikara and Folks (1989), eq. (2.4) for the CDF.
    """
    p, mean, shape = (jnp.asarray(v, dtype=float) for v in (p, mean, shape))
    return mean * _unit_quantile(jnp.log(p), jnp.log1p(-p), shape / mean)


def normal_to_inverse_gaussian(x, mean, shape):
    """The IG(mean, shape) quantile at level Phi(x), for standard normal value(s) x.

    This is the quantile transform that maps a standard normal variable to an inverse
    Gaussian one. The levels enter as log Phi(x) and log Phi(-x), so both tails keep their
    accuracy: |x| up to about 37 works (Phi(-37) ~ 6e-300).

    Args:
      x: standard normal value(s), real.
      mean: mean m > 0.
      shape: shape lambda > 0; tested for 0.01 <= lambda / m <= 1e4.

    Returns:
      W with P(W <= value) = Phi(x), in units of the mean; increasing in x, with
      dW/dx = phi(x) / f(W).
    """
    x, mean, shape = (jnp.asarray(v, dtype=float) for v in (x, mean, shape))
    return mean * _unit_quantile(_log_normal_cdf(x), _log_normal_cdf(-x), shape / mean)
