"""The normal law's tails: the scaled complementary error function, the log normal CDF and a
fast normal CDF."""

from __future__ import annotations

import math

import jax
import jax.numpy as jnp
from jax.scipy.special import erfc

_SQRT_HALF = math.sqrt(0.5)
_TWO_OVER_SQRT_PI = 2.0 / math.sqrt(math.pi)


# ---------------------------------------------------------------------------------------
# Scaled complementary error function and log of the normal CDF
# ---------------------------------------------------------------------------------------

# From this argument on, the continued fraction is used: XLA's erfc loses relative accuracy
# far in its tail (up to 6e-14 near u = 23 in some builds) and underflows beyond u ~ 26.5.
_ERFCX_SWITCH = 6.0
# Depth of the continued fraction; for u >= 6, 14 levels reach 4e-16 (12 give 9e-16).
_ERFCX_FRACTION_DEPTH = 14


def _split_square(u):
    """u^2 as hi + lo with hi exactly representable, so exp(u^2) keeps full precision."""
    # Rounding u to 26 significant bits (25 stored) makes its square exact in float64.
    high = jax.lax.reduce_precision(u, exponent_bits=11, mantissa_bits=25)
    low = u - high
    return high * high, low * (u + high)


def _erfcx_fraction_tail(u):
    """T(u) with sqrt(pi) erfcx(u) = 1 / (u + T(u)), for u >= 6.

    Laplace's continued fraction (Abramowitz and Stegun 7.1.14),
      T(u) = (1/2) / (u + 1 / (u + (3/2) / (u + 2 / (u + ...)))),
    evaluated from a fixed depth upwards.
    """
    tail = jnp.zeros_like(u)
    for k in range(_ERFCX_FRACTION_DEPTH, 1, -1):
        tail = (0.5 * k) / (u + tail)
    return 0.5 / (u + tail)


@jax.custom_jvp
def _erfcx(u):
    """exp(u^2) erfc(u) for u >= 0, to about 2e-15 relative.

    exp(u^2) erfc(u) directly for u < 6 (with u^2 split so that exp keeps full precision),
    the continued fraction of :func:`_erfcx_fraction_tail` for u >= 6.
    """
    moderate = jnp.minimum(u, _ERFCX_SWITCH)
    square_high, square_low = _split_square(moderate)
    direct = jnp.exp(square_high) * jnp.exp(square_low) * erfc(moderate)
    large = jnp.maximum(u, _ERFCX_SWITCH)
    fraction = 1.0 / (math.sqrt(math.pi) * (large + _erfcx_fraction_tail(large)))
    return jnp.where(u < _ERFCX_SWITCH, direct, fraction)


@_erfcx.defjvp
def _erfcx_jvp(primals, tangents):
    (u,), (du,) = primals, tangents
    value = _erfcx(u)
    return value, (2.0 * u * value - _TWO_OVER_SQRT_PI) * du


def _log_normal_cdf(x):
    """log Phi(x) for the standard normal CDF Phi, accurate in both tails."""
    x = jnp.asarray(x, dtype=float)
    tail = jnp.log(0.5 * _erfcx(jnp.abs(x) * _SQRT_HALF)) - 0.5 * x * x  # log Phi(-|x|)
    return jnp.where(x < 0.0, tail, jnp.log1p(-jnp.exp(jnp.minimum(tail, -0.5))))


def _log_one_minus_exp(log_value):
    """log(1 - exp(log_value)) for log_value < 0, without cancellation."""
    near_zero = log_value > -math.log(2.0)
    safe_near = jnp.where(near_zero, log_value, -1.0)
    safe_far = jnp.where(near_zero, -1.0, log_value)
    return jnp.where(near_zero, jnp.log(-jnp.expm1(safe_near)), jnp.log1p(-jnp.exp(safe_far)))


def normal_cdf(x):
    """Standard normal CDF as ``erfc(-x / sqrt 2) / 2``: one special function per point.

    Six times faster on CPU than ``jax.scipy.stats.norm.cdf`` (which evaluates erf and erfc and
    selects), with absolute error below 3e-16 and relative error below 3e-13 in the lower tail
    down to x = -37 (measured against scipy.stats.norm.cdf); the upper tail is 1 - tiny in
    absolute terms. Used for the conditional CDFs of the models (PITs, :mod:`smle.diagnostics.filtering`).
    """
    return 0.5 * jax.lax.erfc(-jnp.asarray(x, dtype=float) * _SQRT_HALF)
