"""The latent Gaussian AR(1) state that every smle model shares.

    x_1 ~ N(init_mean, init_var)
    x_t = intercept + phi x_{t-1} + sigma_eta eta_t,   eta_t ~ N(0, 1),   t = 2..T

The usual parameterisation by the mean, ``x_t - mu = phi (x_{t-1} - mu) + sigma_eta eta_t`` with
the stationary start N(mu, sigma_eta^2 / (1 - phi^2)), is :func:`stationary`. The standardised
form with mean 0 and unit variance (``sigma_eta = sqrt(1 - rho^2)``), used for copula-type mixing
factors, is :func:`standardised`. A random walk with a large-variance start is
:func:`random_walk`.
"""

from __future__ import annotations

from typing import NamedTuple

import jax
import jax.numpy as jnp


class LatentAR1(NamedTuple):
    """Coefficients of a Gaussian AR(1) state (all scalars; JAX arrays or floats).

    Attributes:
      intercept: constant of the transition mean, ``mu (1 - phi)`` for a stationary state.
      phi: autoregressive coefficient.
      sigma_eta: standard deviation of the state innovation.
      init_mean, init_var: mean and variance of x_1.
    """

    intercept: jax.Array
    phi: jax.Array
    sigma_eta: jax.Array
    init_mean: jax.Array
    init_var: jax.Array


def stationary(mu, phi, sigma_eta) -> LatentAR1:
    """AR(1) with mean ``mu``, started from its stationary law (requires |phi| < 1)."""
    return LatentAR1(
        intercept=mu * (1.0 - phi),
        phi=phi,
        sigma_eta=sigma_eta,
        init_mean=mu,
        init_var=sigma_eta**2 / (1.0 - phi**2),
    )


def standardised(rho) -> LatentAR1:
    """Stationary AR(1) with mean 0, unit variance and autocorrelation ``rho`` (|rho| < 1)."""
    return LatentAR1(
        intercept=jnp.zeros_like(rho),
        phi=rho,
        sigma_eta=jnp.sqrt(1.0 - rho**2),
        init_mean=jnp.zeros_like(rho),
        init_var=jnp.ones_like(rho),
    )


def random_walk(sigma_eta, init_mean=0.0, init_var=1e10) -> LatentAR1:
    """Random walk ``x_t = x_{t-1} + sigma_eta eta_t`` with a large-variance start."""
    sigma_eta = jnp.asarray(sigma_eta)
    return LatentAR1(
        intercept=jnp.zeros_like(sigma_eta),
        phi=jnp.ones_like(sigma_eta),
        sigma_eta=sigma_eta,
        init_mean=jnp.asarray(init_mean, sigma_eta.dtype),
        init_var=jnp.asarray(init_var, sigma_eta.dtype),
    )


def sample_path(state: LatentAR1, key: jax.Array, n_periods: int) -> jax.Array:
    """One path x_1..x_T from the state's own law (shape (T,))."""
    noise = jax.random.normal(key, (n_periods,))
    x1 = state.init_mean + jnp.sqrt(state.init_var) * noise[0]

    def step(previous, eta):
        current = state.intercept + state.phi * previous + state.sigma_eta * eta
        return current, current

    _, rest = jax.lax.scan(step, x1, noise[1:])
    return jnp.concatenate([x1[None], rest])


def sample_ahead(state: LatentAR1, x_last: jax.Array, key: jax.Array, n_periods: int) -> jax.Array:
    """Paths x_{T+1}..x_{T+n} from the transition, one per start in ``x_last`` (shape (S,));
    returns shape (n_periods, S). Forecasts start here from draws of the filtered law of x_T."""
    noise = jax.random.normal(key, (n_periods,) + jnp.shape(x_last))

    def step(previous, eta):
        current = state.intercept + state.phi * previous + state.sigma_eta * eta
        return current, current

    return jax.lax.scan(step, jnp.asarray(x_last, float), noise)[1]
