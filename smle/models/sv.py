"""Log-normal stochastic volatility (Taylor 1986, Modelling Financial Time Series).

``sv``::

    y_t = exp(x_t / 2) eps_t,                 eps_t ~ N(0, 1)
    x_t - mu = phi (x_{t-1} - mu) + sigma_eta eta_t,   x_1 from the stationary law

``y_t`` are returns (in the unit the user gives, percent by default elsewhere in smle), ``x_t``
the log variance. The density is written with ``y^2 exp(-x)``, never ``log y^2``, so a zero
return is an ordinary observation.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from smle import params as P
from smle.engine import latent
from smle.models import register
from smle.models.base import Model

LOG_2PI = float(np.log(2 * np.pi))


@dataclasses.dataclass(frozen=True)
class LogVarianceState(Model):
    """What the SV family shares: a stationary Gaussian AR(1) log variance x_t.

    ``x_t - mu = phi (x_{t-1} - mu) + sigma_eta eta_t``, x_1 from the stationary law; its
    independent-factor case is phi = 0. Subclasses add their observation equation and any
    further parameters to :meth:`state_constraints`.
    """

    factor_name = "log variance x_t"

    def factor_display(self, params, x):
        """The volatility scale exp(x_t / 2), in the units of the observations: a log variance such
        as -7.4 says little at a glance, its volatility 0.025 does (no percent: smle does not know
        whether the returns are in percent)."""
        return np.exp(0.5 * np.asarray(x, float)), "volatility exp(x_t / 2)"

    def state_constraints(self):
        return {
            "mu": P.real("mean log variance"),
            "phi": P.interval(-1.0, 1.0, "stationarity of the log variance"),
            "sigma_eta": P.positive("volatility of log variance"),
        }

    def latent(self, params):
        return latent.stationary(params["mu"], params["phi"], params["sigma_eta"])

    def independent_params(self, params):
        return {**params, "phi": jnp.zeros_like(jnp.asarray(params["phi"]))}

    def return_errors(self, params, key, shape):
        """Standardised return errors eps_t (mean 0, variance 1) of the given shape: N(0, 1) here."""
        return jax.random.normal(key, shape)

    def simulate_ahead(self, params, y, x_last, n_periods, key):
        """Returns exp(x_t / 2) eps_t and variances exp(x_t) beyond the data, the log variance
        carried forward from the draws ``x_last`` of x_T (the data enter only through them)."""
        state_key, error_key = jax.random.split(key)
        x = latent.sample_ahead(self.latent(params), x_last, state_key, n_periods)
        return jnp.exp(0.5 * x) * self.return_errors(params, error_key, x.shape), jnp.exp(x), x


@register
@dataclasses.dataclass(frozen=True)
class StochasticVolatility(LogVarianceState):
    name = "sv"
    summary = "log-normal stochastic volatility with Gaussian errors"
    equations = "y_t = exp(x_t/2) eps_t; x_t - mu = phi (x_{t-1} - mu) + sigma_eta eta_t"
    expects_returns = True

    def constraints(self):
        return self.state_constraints()

    def log_obs_density(self, params, data, x):
        return -0.5 * (LOG_2PI + x + data[:, None] ** 2 * jnp.exp(-x))

    def simulate(self, params, n_periods, key):
        state_key, noise_key = jax.random.split(key)
        x = latent.sample_path(self.latent(params), state_key, n_periods)
        y = jnp.exp(0.5 * x) * jax.random.normal(noise_key, (n_periods,))
        return y, x

    def start_params(self, y):
        y = np.asarray(y, float)
        return {"mu": float(np.log(np.var(y))), "phi": 0.95, "sigma_eta": 0.25}

    def obs_cdf(self, params, data, x):
        from smle.distributions import normal_cdf  # here, not at the top: keeps this hook self-contained

        return normal_cdf(data[:, None] * jnp.exp(-0.5 * x))
