"""The normal inverse Gaussian (NIG) law of Barndorff-Nielsen (1997): log-density and moments."""

from __future__ import annotations

import math
from typing import NamedTuple

import jax
import jax.numpy as jnp

from smle.distributions.bessel import log_bessel_k1e

_LOG_PI = math.log(math.pi)


# ---------------------------------------------------------------------------------------
# Normal inverse Gaussian
# ---------------------------------------------------------------------------------------


class NigMoments(NamedTuple):
    """The first four moments of a normal inverse Gaussian law (in the units of x)."""

    mean: jax.Array
    variance: jax.Array
    skewness: jax.Array
    excess_kurtosis: jax.Array


def nig_log_density(x, alpha, beta, mu, delta):
    """Log-density of the normal inverse Gaussian law NIG(alpha, beta, mu, delta).

    Barndorff-Nielsen (1997), with q(x) = sqrt(delta^2 + (x - mu)^2) and
    gamma = sqrt(alpha^2 - beta^2):

      f(x) = alpha delta / pi * exp(delta gamma + beta (x - mu)) K1(alpha q(x)) / q(x).

    It is the law of x = mu + beta W + sqrt(W) e with e standard normal and W inverse
    Gaussian with mean delta/gamma and shape delta^2.

    Args:
      x: observation(s), in the units of the data.
      alpha: tail heaviness, alpha > 0 (inverse units of x).
      beta: asymmetry, |beta| < alpha (inverse units of x).
      mu: location, real (units of x).
      delta: scale, delta > 0 (units of x).

    Returns:
      log f(x), broadcast over the arguments. The exponent delta gamma + beta (x - mu)
      - alpha q(x) is formed without cancellation, so far tails (where the log-density is
      large and negative) keep full relative accuracy.

    References: Barndorff-Nielsen, O. E. (1997), Scand. J. Statistics 24, 1-13, eq. (2.1).
    """
    x, alpha, beta, mu, delta = (jnp.asarray(v, dtype=float) for v in (x, alpha, beta, mu, delta))
    gamma = jnp.sqrt((alpha - beta) * (alpha + beta))
    r = x - mu
    q = jnp.hypot(delta, r)
    alpha_q = alpha * q
    beta_r = beta * r
    # alpha q - beta r > 0 always; when beta r > 0 the difference cancels, and the identity
    # (alpha q)^2 - (beta r)^2 = (alpha delta)^2 + (gamma r)^2 removes the cancellation.
    stable = ((alpha * delta) ** 2 + (gamma * r) ** 2) / (alpha_q + jnp.abs(beta_r))
    alpha_q_minus_beta_r = jnp.where(beta_r > 0.0, stable, alpha_q - beta_r)
    return (
        jnp.log(alpha)
        + jnp.log(delta)
        - _LOG_PI
        + delta * gamma
        - alpha_q_minus_beta_r
        + log_bessel_k1e(alpha_q)
        - jnp.log(q)
    )


def nig_moments(alpha, beta, mu, delta) -> NigMoments:
    """Mean, variance, skewness and excess kurtosis of NIG(alpha, beta, mu, delta).

    With gamma = sqrt(alpha^2 - beta^2) (Barndorff-Nielsen 1997, section 2):
      mean = mu + delta beta / gamma,          variance = delta alpha^2 / gamma^3,
      skewness = 3 beta / (alpha sqrt(delta gamma)),
      excess kurtosis = 3 (1 + 4 beta^2 / alpha^2) / (delta gamma).

    Args: as for :func:`nig_log_density` (alpha > 0, |beta| < alpha, delta > 0).

    Returns:
      A :class:`NigMoments` of arrays broadcast over the arguments; mean in units of x,
      variance in units of x squared, the last two unitless.

    References: Barndorff-Nielsen, O. E. (1997), Scand. J. Statistics 24, 1-13.
    """
    alpha, beta, mu, delta = (jnp.asarray(v, dtype=float) for v in (alpha, beta, mu, delta))
    gamma = jnp.sqrt((alpha - beta) * (alpha + beta))
    return NigMoments(
        mean=mu + delta * beta / gamma,
        variance=delta * alpha**2 / gamma**3,
        skewness=3.0 * beta / (alpha * jnp.sqrt(delta * gamma)),
        excess_kurtosis=3.0 * (1.0 + 4.0 * (beta / alpha) ** 2) / (delta * gamma),
    )
