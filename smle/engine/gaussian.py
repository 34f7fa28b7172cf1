"""Gaussian-kernel algebra for EIS with a Gaussian AR(1) state.

For one period the auxiliary kernel is

    k(x; x_prev) = N(x; d + phi x_prev, v) exp(b x - c x^2 / 2)

with transition intercept ``d``, slope ``phi`` and variance ``v`` (for the first period:
``d`` the initial mean, ``phi = 0``, ``v`` the initial variance). Its integral over ``x`` is

    log chi(x_prev) = alpha + beta x_prev - gamma x_prev^2 / 2,

    P     = 1/v + c
    alpha = -log(v P)/2 + (-c d^2 + 2 b d + v b^2) / (2 v P)
    beta  = phi (b - c d) / (v P)
    gamma = phi^2 c / (v P)

and the normalised kernel is the sampler ``x | x_prev ~ N((d/v + b)/P + phi/(v P) x_prev, 1/P)``.
Reference: Richard and Zhang (2007), J. Econometrics 141, section 3 (the Gaussian case, written
out here in our own notation).
"""

from __future__ import annotations

from typing import NamedTuple

import jax.numpy as jnp


class ChiCoefficients(NamedTuple):
    """log chi(x_prev) = alpha + beta x_prev - gamma x_prev^2 / 2."""

    alpha: jnp.ndarray
    beta: jnp.ndarray
    gamma: jnp.ndarray


class SamplerMoments(NamedTuple):
    """x | x_prev ~ N(mean_intercept + mean_slope x_prev, 1 / precision)."""

    mean_intercept: jnp.ndarray
    mean_slope: jnp.ndarray
    precision: jnp.ndarray


def kernel_integral(b, c, d, phi, v, cross=0.0) -> ChiCoefficients:
    """Coefficients of log chi, the log integrating constant of the kernel, as a quadratic in x_prev.

    ``cross`` (f) adds the factor ``exp(-f x_prev x)`` to the kernel (a kernel over two consecutive
    states, :mod:`smle.engine.eis_pairs`): it is the linear coefficient ``b - f x_prev``, so

        beta  = (phi (b - c d) - f (d + v b)) / (v P),   gamma = (phi^2 c + f (2 phi - v f)) / (v P).
    """
    precision = 1.0 / v + c
    vp = v * precision
    alpha = -0.5 * jnp.log(vp) + (-c * d * d + 2.0 * b * d + v * b * b) / (2.0 * vp)
    beta = (phi * (b - c * d) - cross * (d + v * b)) / vp
    gamma = (phi * phi * c + cross * (2.0 * phi - v * cross)) / vp
    return ChiCoefficients(alpha, beta, gamma)


def sampler_moments(b, c, d, phi, v, cross=0.0) -> SamplerMoments:
    """Mean (as intercept and slope in x_prev) and precision of the normalised kernel (``cross``:
    as in :func:`kernel_integral`, it lowers the slope by ``f / P``)."""
    precision = 1.0 / v + c
    return SamplerMoments((d / v + b) / precision, phi / (v * precision) - cross / precision, precision)


def log_normal_density(x, mean, var):
    """log N(x; mean, var)."""
    return -0.5 * (jnp.log(2.0 * jnp.pi * var) + (x - mean) ** 2 / var)
