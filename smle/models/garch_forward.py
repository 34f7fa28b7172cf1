"""The AR(1)-GARCH(1,1) recursion carried beyond the data, shared by ``garch`` and ``garch-mix``.

After the last period T of the data the conditional mean and variance of the next period are
known: ``m_{T+1} = mu + ar1 r_T`` and ``h_{T+1} = omega + alpha e_T^2 + beta h_T``. From there each
path runs the recursion of the models (Bollerslev 1986, J. Econometrics 31) on its own
standardised shocks: ``e_t = sqrt(h_t) z_t``, ``r_t = mu + ar1 r_{t-1} + e_t``,
``h_{t+1} = omega + alpha e_t^2 + beta h_t``.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp


def continue_garch(params, last_return, last_residual, last_variance, shocks):
    """``(returns, variances)``, each shaped like ``shocks`` (n_periods, S): the paths r_{T+k}
    and h_{T+k}, k = 1..n, from the data's last return r_T, residual e_T and variance h_T
    (scalars) and standardised shocks z_{T+k} (mean 0, variance 1 given the past)."""
    mu, ar1 = params["mu"], params["ar1"]
    omega, alpha, beta = params["omega"], params["alpha"], params["beta"]
    width = shocks.shape[1:]
    first_variance = omega + alpha * last_residual**2 + beta * last_variance

    def step(carry, z):
        previous_return, h = carry
        e = jnp.sqrt(h) * z
        r = mu + ar1 * previous_return + e
        return (r, omega + alpha * e**2 + beta * h), (r, h)

    start = (jnp.broadcast_to(last_return, width), jnp.broadcast_to(first_variance, width))
    return jax.lax.scan(step, start, shocks)[1]
