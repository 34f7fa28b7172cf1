"""The Student-t law: log-density in (location, scale, degrees of freedom) and a unit-variance
variant (Abramowitz and Stegun 1964, 6.1.40 for the log-gamma expansion)."""

from __future__ import annotations

import math

import jax.numpy as jnp
from jax.scipy.special import gammaln

_LOG_PI = math.log(math.pi)


# ---------------------------------------------------------------------------------------
# Student t
# ---------------------------------------------------------------------------------------

# Above this value of nu/2 the log-gamma difference is taken from its asymptotic series,
# whose first omitted term is below 2e-18 there; direct log-gamma values would cancel.
_GAMMA_RATIO_SWITCH = 25.0


def _log_gamma_ratio_half(x):
    """log Gamma(x + 1/2) - log Gamma(x) for x > 0, without cancellation for large x.

    For large x the Stirling series of log Gamma(x + h) (Abramowitz and Stegun 6.1.40 with
    Bernoulli polynomials, 23.1) gives
      1/2 log x - 1/(8x) + 1/(192 x^3) - 1/(640 x^5) + 17/(14336 x^7) - 31/(18432 x^9) + ...
    """
    large = jnp.maximum(x, _GAMMA_RATIO_SWITCH)
    t = 1.0 / (large * large)
    series = 0.5 * jnp.log(large) + (1.0 / large) * (
        -1.0 / 8.0 + t * (1.0 / 192.0 + t * (-1.0 / 640.0 + t * (17.0 / 14336.0 + t * (-31.0 / 18432.0))))
    )
    small = jnp.minimum(x, _GAMMA_RATIO_SWITCH)
    direct = gammaln(small + 0.5) - gammaln(small)
    return jnp.where(x > _GAMMA_RATIO_SWITCH, series, direct)


def student_t_log_density(x, loc, scale, nu):
    """Log-density of the Student-t law with location, scale and nu degrees of freedom.

      f(x) = Gamma((nu+1)/2) / (Gamma(nu/2) sqrt(nu pi) scale)
             * (1 + ((x - loc) / scale)^2 / nu)^(-(nu+1)/2).

    Args:
      x: point(s), real.
      loc: location, real (units of x).
      scale: scale > 0 (units of x); the variance is scale^2 nu / (nu - 2) for nu > 2.
      nu: degrees of freedom, nu > 0 (large values approach the normal law smoothly).

    Returns:
      log f(x), broadcast over the arguments.
    """
    x, loc, scale, nu = (jnp.asarray(v, dtype=float) for v in (x, loc, scale, nu))
    z = (x - loc) / scale
    return (
        _log_gamma_ratio_half(0.5 * nu)
        - 0.5 * (jnp.log(nu) + _LOG_PI)
        - jnp.log(scale)
        - 0.5 * (nu + 1.0) * jnp.log1p(z * z / nu)
    )


def standardized_student_t_log_density(x, nu):
    """Log-density of the Student-t law with nu > 2 rescaled to mean 0 and variance 1.

    That is :func:`student_t_log_density` with loc 0 and scale sqrt((nu - 2) / nu), the
    error law of a Student-t stochastic volatility model.

    Args:
      x: point(s), real (unitless).
      nu: degrees of freedom, nu > 2.

    Returns:
      log f(x), broadcast over the arguments.
    """
    nu = jnp.asarray(nu, dtype=float)
    return student_t_log_density(x, 0.0, jnp.sqrt((nu - 2.0) / nu), nu)
