"""Modified Bessel functions of the second kind, ``log K0`` and ``log K1`` and their exponentially
scaled forms (Abramowitz and Stegun 1964, 9.6.11, 9.6.13, 9.6.24; Trefethen and Weideman 2014)."""

from __future__ import annotations


import jax
import jax.numpy as jnp
import numpy as np

_EULER_GAMMA = 0.57721566490153286061


# ---------------------------------------------------------------------------------------
# Modified Bessel functions of the second kind, orders 0 and 1
# ---------------------------------------------------------------------------------------

# Below this argument the ascending series is used, above it the trapezoidal rule.
_BESSEL_SWITCH = 1.0
# Twelve series terms: the first omitted one is below (1/4)^12 / (12!)^2 ~ 3e-25.
_BESSEL_SERIES_TERMS = 12
# Trapezoidal rule on s in [0, 9.5] with step 1/4. With the change of variables below the
# integrand is exp(-s^2/2) times a function analytic in |Im s| < 2 sqrt(z), so for z >= 1
# the discretisation error is of order exp(-2 pi * 1.9 / 0.25) ~ 1e-21 (Trefethen and
# Weideman 2014) and the truncation error exp(-9.5^2/2) ~ 2e-20.
_TRAPEZOID_STEP = 0.25
_TRAPEZOID_NODES = np.arange(0.0, 9.5 + 1e-9, _TRAPEZOID_STEP)
_TRAPEZOID_WEIGHTS = _TRAPEZOID_STEP * np.exp(-0.5 * _TRAPEZOID_NODES**2)
_TRAPEZOID_WEIGHTS[0] *= 0.5
_TRAPEZOID_NODES_SQUARED = _TRAPEZOID_NODES**2


def _log_bessel_k01e_series(z):
    """(log(e^z K0(z)), log(e^z K1(z))) from the ascending series, for 0 < z <= 1.

    Abramowitz and Stegun 9.6.13 (K0) and 9.6.11 with n = 1 (K1), rearranged as
      K0(z) = -(log(z/2) + gamma) I0(z) + sum_k H_k y^k / (k!)^2,
      z K1(z) = 1 + (z^2/2) (log(z/2) + gamma) sum_k y^k / (k! (k+1)!)
                  - (z^2/4) sum_k (H_k + H_{k+1}) y^k / (k! (k+1)!),
    with y = z^2 / 4, H_k the k-th harmonic number and gamma Euler's constant. For z <= 1
    the terms of K0 do not cancel, and z K1 is evaluated without the 1/z pole.
    """
    y = 0.25 * z * z
    log_half_z = jnp.log(0.5 * z)
    term_0 = jnp.ones_like(z)  # y^k / (k!)^2
    term_1 = jnp.ones_like(z)  # y^k / (k! (k+1)!)
    sum_i0 = term_0
    sum_i1 = term_1
    sum_h0 = jnp.zeros_like(z)
    sum_h1 = term_1  # H_0 + H_1 = 1
    harmonic = 0.0
    for k in range(1, _BESSEL_SERIES_TERMS):
        term_0 = term_0 * y / (k * k)
        term_1 = term_1 * y / (k * (k + 1))
        harmonic_next = harmonic + 1.0 / k
        sum_i0 = sum_i0 + term_0
        sum_i1 = sum_i1 + term_1
        sum_h0 = sum_h0 + harmonic_next * term_0
        sum_h1 = sum_h1 + (2.0 * harmonic_next + 1.0 / (k + 1)) * term_1
        harmonic = harmonic_next
    k0 = -(log_half_z + _EULER_GAMMA) * sum_i0 + sum_h0
    z_k1_minus_one = 2.0 * y * (log_half_z + _EULER_GAMMA) * sum_i1 - y * sum_h1
    log_k0e = jnp.log(k0) + z
    log_k1e = jnp.log1p(z_k1_minus_one) - jnp.log(z) + z
    return log_k0e, log_k1e


def _log_bessel_k01e_integral(z):
    """(log(e^z K0(z)), log(e^z K1(z))) by the trapezoidal rule, for z >= 1.

    Start from Abramowitz and Stegun 9.6.24, K_nu(z) = int_0^inf exp(-z cosh t) cosh(nu t) dt,
    and substitute s = 2 sqrt(z) sinh(t/2), so that z (cosh t - 1) = s^2/2 and, with
    u = s^2 / (4 z),
      sqrt(z) e^z K0(z) = int_0^inf exp(-s^2/2) (1 + u)^(-1/2) ds,
      sqrt(z) e^z K1(z) = int_0^inf exp(-s^2/2) (1 + 2u) (1 + u)^(-1/2) ds.
    Both integrands are even, positive and analytic near the real line, so the trapezoidal
    rule converges geometrically and sums positive terms only; the same nodes serve every
    z >= 1 (as z grows the integrands tend to exp(-s^2/2)).
    """
    u = _TRAPEZOID_NODES_SQUARED / (4.0 * z[..., None])
    inverse_root = jax.lax.rsqrt(1.0 + u)
    integral_0 = jnp.sum(_TRAPEZOID_WEIGHTS * inverse_root, axis=-1)
    integral_1 = jnp.sum(_TRAPEZOID_WEIGHTS * (1.0 + 2.0 * u) * inverse_root, axis=-1)
    half_log_z = 0.5 * jnp.log(z)
    return jnp.log(integral_0) - half_log_z, jnp.log(integral_1) - half_log_z


@jax.custom_jvp
def _log_bessel_k01e(z):
    """(log(e^z K0(z)), log(e^z K1(z))) for z > 0, elementwise."""
    z = jnp.asarray(z, dtype=float)
    small = z <= _BESSEL_SWITCH
    # Each branch sees only arguments in its own range, so neither overflows.
    series_0, series_1 = _log_bessel_k01e_series(jnp.minimum(z, _BESSEL_SWITCH))
    integral_0, integral_1 = _log_bessel_k01e_integral(jnp.maximum(z, _BESSEL_SWITCH))
    return jnp.where(small, series_0, integral_0), jnp.where(small, series_1, integral_1)


@_log_bessel_k01e.defjvp
def _log_bessel_k01e_jvp(primals, tangents):
    # K0' = -K1 and K1' = -K0 - K1/z (Abramowitz and Stegun 9.6.27). The rule calls the
    # function itself, so derivatives of every order are available.
    (z,), (dz,) = primals, tangents
    z = jnp.asarray(z, dtype=float)
    log_k0e, log_k1e = _log_bessel_k01e(z)
    ratio = jnp.exp(log_k1e - log_k0e)  # K1 / K0
    d_log_k0e = 1.0 - ratio
    d_log_k1e = 1.0 - 1.0 / ratio - 1.0 / z
    return (log_k0e, log_k1e), (d_log_k0e * dz, d_log_k1e * dz)


def log_bessel_k0e(z):
    """log(exp(z) K0(z)), the log of the exponentially scaled Bessel function K0.

    Args:
      z: positive real argument(s), any shape; accurate for 1e-300 < z < 1e300.

    Returns:
      Array of the same shape. Relative error of exp(result) about 2e-15 against
      ``scipy.special.k0e``.

    References: Abramowitz and Stegun (1964) 9.6.13 (series, z <= 1) and 9.6.24 (integral,
    evaluated by the trapezoidal rule, z > 1).
    """
    return _log_bessel_k01e(z)[0]


def log_bessel_k1e(z):
    """log(exp(z) K1(z)), the log of the exponentially scaled Bessel function K1.

    Args:
      z: positive real argument(s), any shape; accurate for 1e-300 < z < 1e300.

    Returns:
      Array of the same shape; derivative 1 - K0(z)/K1(z) - 1/z.

    References: Abramowitz and Stegun (1964) 9.6.11 (series, z <= 1) and 9.6.24 (integral,
    evaluated by the trapezoidal rule, z > 1).
    """
    return _log_bessel_k01e(z)[1]


def log_bessel_k0(z):
    """log K0(z), the modified Bessel function of the second kind of order 0, for z > 0.

    Computed as ``log_bessel_k0e(z) - z``, so it does not underflow for large z.
    """
    z = jnp.asarray(z, dtype=float)
    return log_bessel_k0e(z) - z


def log_bessel_k1(z):
    """log K1(z), the modified Bessel function of the second kind of order 1, for z > 0.

    Computed as ``log_bessel_k1e(z) - z``: finite from z ~ 1e-300 (where it is -log z) to
    z ~ 1e300. Derivative -K0(z)/K1(z) - 1/z.
    """
    z = jnp.asarray(z, dtype=float)
    return log_bessel_k1e(z) - z
