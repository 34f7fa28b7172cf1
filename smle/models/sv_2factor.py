"""Two-factor log-normal stochastic volatility: a persistent and a fast log-variance component.

``sv-2factor``::

    y_t = exp((mu + x_{1,t} + x_{2,t}) / 2) eps_t,          eps_t ~ N(0, 1)
    x_{j,t} = phi_j x_{j,t-1} + sigma_eta_j eta_{j,t},      j = 1, 2, independent, stationary start

The two components enter only through their sum, so they are exchangeable; they are identified
by ordering their autocorrelations, ``-1 < phi2 < phi1 < 1`` (component 1 is the persistent one).
The ordering is a joint constraint: values a user gives are checked (:meth:`check_joint`), and
the optimiser works on ``u1 = logit((phi1 + 1) / 2)``, ``u2 = logit((phi2 + 1) / (phi1 + 1))``,
which maps the real plane onto exactly that region. Standard errors of phi1 and phi2 are then
delta-method ones. (Alizadeh, Brandt and Diebold 2002, J. Finance 57, and Chernov, Gallant,
Ghysels and Tauchen 2003, J. Econometrics 116, motivate two volatility components.)
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from smle import params as P
from smle.engine import latent_var
from smle.errors import SmleInputError
from smle.models import register
from smle.models.base import Model
from smle.models.sv import LOG_2PI
from smle.models.var1_noise import _concrete


def _logit(p):
    return jnp.log(p) - jnp.log1p(-p)


@register
@dataclasses.dataclass(frozen=True)
class TwoFactorSV(Model):
    name = "sv-2factor"
    summary = "log-normal stochastic volatility with a persistent and a fast log-variance component"
    equations = ("y_t = exp((mu + x1_t + x2_t)/2) eps_t; x_j,t = phi_j x_j,t-1 + sigma_eta_j eta_j,t, "
                 "j = 1, 2; phi2 < phi1")
    expects_returns = True
    state_dim = 2
    factor_name = "log-variance components (x1_t persistent, x2_t fast)"

    def constraints(self):
        return {
            "mu": P.real("mean log variance"),
            "phi1": P.interval(-1.0, 1.0, "stationarity of the persistent component (and phi2 < phi1)"),
            "sigma_eta1": P.positive("innovation scale of the persistent component"),
            "phi2": P.interval(-1.0, 1.0, "stationarity of the fast component (and phi2 < phi1)"),
            "sigma_eta2": P.positive("innovation scale of the fast component"),
        }

    def check_joint(self, params) -> None:
        """Raise SmleInputError unless phi2 < phi1 (no-op on traced values)."""
        phi1, phi2 = _concrete(params["phi1"]), _concrete(params["phi2"])
        if phi1 is not None and phi2 is not None and not phi2 < phi1:
            raise SmleInputError(
                f"params['phi2'] = {phi2!r} is not below params['phi1'] = {phi1!r}; model '{self.name}' identifies "
                "its components by ordering their autocorrelations: accepted -1 < phi2 < phi1 < 1"
            )

    def to_real(self, params):
        self.check_joint(params)
        phi1 = jnp.asarray(params["phi1"], float)
        phi2 = jnp.asarray(params["phi2"], float)
        return jnp.stack([
            jnp.asarray(params["mu"], float),
            _logit(0.5 * (phi1 + 1.0)),
            jnp.log(jnp.asarray(params["sigma_eta1"], float)),
            _logit((phi2 + 1.0) / (phi1 + 1.0)),
            jnp.log(jnp.asarray(params["sigma_eta2"], float)),
        ])

    def from_real(self, unconstrained):
        phi1 = -1.0 + 2.0 * P.jax_sigmoid(unconstrained[1])
        return {
            "mu": unconstrained[0],
            "phi1": phi1,
            "sigma_eta1": jnp.exp(unconstrained[2]),
            "phi2": -1.0 + (phi1 + 1.0) * P.jax_sigmoid(unconstrained[3]),
            "sigma_eta2": jnp.exp(unconstrained[4]),
        }

    def latent_var(self, params):
        phi = jnp.stack([jnp.asarray(params["phi1"], float), jnp.asarray(params["phi2"], float)])
        sigma = jnp.stack([jnp.asarray(params["sigma_eta1"], float), jnp.asarray(params["sigma_eta2"], float)])
        return latent_var.independent_ar1(0.0, phi, sigma)

    def log_obs_density(self, params, data, x):
        log_var = params["mu"] + jnp.sum(x, axis=-1)
        return -0.5 * (LOG_2PI + log_var + data[:, None] ** 2 * jnp.exp(-log_var))

    def obs_cdf(self, params, data, x):
        from smle.distributions import normal_cdf

        return normal_cdf(data[:, None] * jnp.exp(-0.5 * (params["mu"] + jnp.sum(x, axis=-1))))

    def component_names(self):
        return ("x1 (persistent)", "x2 (fast)")

    def simulate(self, params, n_periods, key):
        state_key, noise_key = jax.random.split(key)
        x = latent_var.sample_path(self.latent_var(params), state_key, n_periods)
        y = jnp.exp(0.5 * (params["mu"] + jnp.sum(x, axis=-1))) * jax.random.normal(noise_key, (n_periods,))
        return y, x

    def start_params(self, y):
        y = np.asarray(y, float)
        return {"mu": float(np.log(np.var(y))), "phi1": 0.98, "sigma_eta1": 0.15, "phi2": 0.5, "sigma_eta2": 0.3}
