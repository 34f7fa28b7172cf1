"""Linear Gaussian state plus noise: the exactness reference of the engine.

``ar1-noise``::

    y_t = x_t + e_t,                          e_t ~ N(0, sigma_eps^2)
    x_t - mu = phi (x_{t-1} - mu) + sigma_eta eta_t,   x_1 from the stationary law

``local-level`` (random-walk state, large-variance start N(init_mean, init_var))::

    y_t = x_t + e_t,   x_t = x_{t-1} + sigma_eta eta_t

Both have an exact Kalman-filter likelihood (:mod:`smle.engine.kalman`), and since log g_t is
exactly quadratic in x_t, EIS reproduces it to rounding error for any number of draws.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from smle import params as P
from smle.engine import latent
from smle.engine.gaussian import log_normal_density
from smle.models import register
from smle.models.base import Model


class _GaussianNoise:
    """The measurement shared by both forms: y_t = x_t + N(0, sigma_eps^2)."""

    series_labels = ("observation",)

    def log_obs_density(self, params, data, x):
        return log_normal_density(data[:, None], x, params["sigma_eps"] ** 2)

    def mode_guess(self, params, data):
        return jnp.asarray(data, float)

    def gaussian_measurement(self, params):
        return params["sigma_eps"] ** 2

    def simulate_ahead(self, params, y, x_last, n_periods, key):
        """Observations x_t + e_t beyond the data, the state carried forward from ``x_last``;
        the variance about the state is sigma_eps^2 in every period."""
        state_key, noise_key = jax.random.split(key)
        x = latent.sample_ahead(self.latent(params), x_last, state_key, n_periods)
        observations = x + params["sigma_eps"] * jax.random.normal(noise_key, x.shape)
        return observations, jnp.full(x.shape, params["sigma_eps"] ** 2), x

    def obs_cdf(self, params, data, x):
        from smle.distributions import normal_cdf  # here, not at the top: keeps this hook self-contained

        return normal_cdf((data[:, None] - x) / params["sigma_eps"])


@register
@dataclasses.dataclass(frozen=True)
class AR1Noise(_GaussianNoise, Model):
    name = "ar1-noise"
    summary = "Gaussian AR(1) state observed with Gaussian noise (linear Gaussian reference)"
    equations = "y_t = x_t + e_t, e_t ~ N(0, sigma_eps^2); x_t - mu = phi (x_{t-1} - mu) + sigma_eta eta_t"

    def constraints(self):
        return {
            "mu": P.real("state mean"),
            "phi": P.interval(-1.0, 1.0, "stationarity of the state"),
            "sigma_eta": P.positive("state innovation scale"),
            "sigma_eps": P.positive("measurement noise scale"),
        }

    def latent(self, params):
        return latent.stationary(params["mu"], params["phi"], params["sigma_eta"])

    def simulate(self, params, n_periods, key):
        state_key, noise_key = jax.random.split(key)
        x = latent.sample_path(self.latent(params), state_key, n_periods)
        y = x + params["sigma_eps"] * jax.random.normal(noise_key, (n_periods,))
        return y, x

    def start_params(self, y):
        y = np.asarray(y, float)
        var = float(np.var(y))
        r1 = float(np.corrcoef(y[1:], y[:-1])[0, 1])
        phi = float(np.clip(r1, 0.05, 0.95))
        return {"mu": float(np.mean(y)), "phi": phi,
                "sigma_eta": float(np.sqrt(0.5 * var * (1 - phi**2))),
                "sigma_eps": float(np.sqrt(0.5 * var))}

    def independent_params(self, params):
        return {**params, "phi": jnp.zeros_like(jnp.asarray(params["phi"]))}


@register
@dataclasses.dataclass(frozen=True)
class LocalLevel(_GaussianNoise, Model):
    """Local level model with a large-variance start.

    ``init_var`` stands in for a diffuse start: the exact diffuse log-likelihood (Durbin and
    Koopman 2012, section 2.10, which drops the first period's dependence on the initial
    variance) is the limit of ``loglik + log(init_var) / 2`` as ``init_var`` grows; the error at
    finite ``init_var`` is of order ``sigma^2 / init_var``.
    """

    init_mean: float = 0.0
    init_var: float = 1e10

    name = "local-level"
    summary = "random-walk state observed with Gaussian noise (large-variance start)"
    equations = "y_t = x_t + e_t, e_t ~ N(0, sigma_eps^2); x_t = x_{t-1} + sigma_eta eta_t"
    stationary_state = False

    def constraints(self):
        return {
            "sigma_eta": P.positive("state innovation scale"),
            "sigma_eps": P.positive("measurement noise scale"),
        }

    def latent(self, params):
        return latent.random_walk(params["sigma_eta"], self.init_mean, self.init_var)

    def simulate(self, params, n_periods, key):
        state_key, noise_key = jax.random.split(key)
        sigma_eta = jnp.asarray(params["sigma_eta"], float)
        steps = sigma_eta * jax.random.normal(state_key, (n_periods,))
        x = self.init_mean + jnp.cumsum(steps)  # starts near init_mean: simulation needs no diffuse law
        y = x + params["sigma_eps"] * jax.random.normal(noise_key, (n_periods,))
        return y, x

    def start_params(self, y):
        y = np.asarray(y, float)
        diff_var = float(np.var(np.diff(y)))
        return {"sigma_eta": float(np.sqrt(0.3 * diff_var)), "sigma_eps": float(np.sqrt(0.35 * diff_var))}
