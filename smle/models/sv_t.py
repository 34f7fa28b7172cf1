"""Log-normal stochastic volatility with Student-t errors (Harvey, Ruiz and Shephard 1994,
Review of Economic Studies 61; Chib, Nardari and Shephard 2002, J. Econometrics 108).

``sv-t``::

    y_t = exp(x_t / 2) eps_t,        eps_t ~ t_nu standardised to unit variance (nu > 2)
    x_t - mu = phi (x_{t-1} - mu) + sigma_eta eta_t,   x_1 from the stationary law

The error is the *standardised* Student-t law: ``eps_t = sqrt((nu - 2) / nu) T_t`` with ``T_t``
a Student-t variable with ``nu`` degrees of freedom, so that ``Var(eps_t) = 1`` and
``exp(x_t / 2)`` is the conditional standard deviation of ``y_t`` (as in ``sv``); ``mu`` keeps
its meaning across the two models. As ``nu`` grows the model tends to ``sv``.

For every ``x`` the log-density is concave in ``x_t`` (its second derivative is
``-(nu + 1)/2 * u / (1 + u)^2`` with ``u = y^2 exp(-x) / (nu - 2)``), so the Newton start of
EIS is well defined; it is written with ``y^2 exp(-x)``, so a zero return is an ordinary
observation.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from smle import params as P
from smle.engine import latent
from smle.distributions import standardized_student_t_log_density
from smle.models import register
from smle.models.sv import LogVarianceState


@register
@dataclasses.dataclass(frozen=True)
class StudentTStochasticVolatility(LogVarianceState):
    name = "sv-t"
    summary = "log-normal stochastic volatility with standardised Student-t errors (nu estimated)"
    equations = (
        "y_t = exp(x_t/2) eps_t, eps_t standardised t_nu (unit variance); "
        "x_t - mu = phi (x_{t-1} - mu) + sigma_eta eta_t"
    )
    expects_returns = True

    def constraints(self):
        return {
            **self.state_constraints(),
            "nu": P.greater_than(2.0, "degrees of freedom; nu > 2 for a finite error variance"),
        }

    def log_obs_density(self, params, data, x):
        # eps = y exp(-x/2); the Jacobian of y -> eps adds -x/2
        standardised = data[:, None] * jnp.exp(-0.5 * x)
        return standardized_student_t_log_density(standardised, params["nu"]) - 0.5 * x

    def simulate(self, params, n_periods, key):
        state_key, noise_key = jax.random.split(key)
        x = latent.sample_path(self.latent(params), state_key, n_periods)
        return jnp.exp(0.5 * x) * self.return_errors(params, noise_key, (n_periods,)), x

    def start_params(self, y):
        y = np.asarray(y, float)
        return {"mu": float(np.log(np.var(y))), "phi": 0.95, "sigma_eta": 0.2, "nu": 10.0}

    def return_errors(self, params, key, shape):
        """Standardised Student-t errors (unit variance) of the given shape."""
        nu = jnp.asarray(params["nu"], float)
        return jax.random.t(key, nu, shape) * jnp.sqrt((nu - 2.0) / nu)

    def obs_cdf(self, params, data, x):
        # P(T <= t) of a Student-t with nu degrees of freedom through the regularised incomplete
        # beta function: the tail 0.5 I_{nu / (nu + t^2)}(nu / 2, 1 / 2) (Abramowitz and Stegun 26.7.1)
        nu = params["nu"]
        t = data[:, None] * jnp.exp(-0.5 * x) * jnp.sqrt(nu / (nu - 2.0))
        tail = 0.5 * jax.scipy.special.betainc(0.5 * nu, 0.5, nu / (nu + t**2))
        return jnp.where(t > 0, 1.0 - tail, tail)
