"""Stochastic volatility with leverage, in the form of Yu (2005, J. Econometrics 127, 165-178).

``sv-leverage``::

    y_t = exp(x_t / 2) eps_t
    x_{t+1} - mu = phi (x_t - mu) + sigma_eta eta_{t+1},   corr(eps_t, eta_{t+1}) = delta

with (eps_t, eta_{t+1}) standard bivariate normal and x_1 from the stationary law (leverage does
not change the marginal law of the state). A negative return with delta < 0 raises the next
period's log variance. Given x_t and y_t the next state is Gaussian:

    x_{t+1} | x_t, y_t ~ N(mu + phi (x_t - mu) + delta sigma_eta y_t exp(-x_t / 2),
                           sigma_eta^2 (1 - delta^2)),

a transition that depends on the data and, non-linearly, on x_t (``transition_uses_data``). The
exact grid filter takes it as a per-period transition (:meth:`period_transition`); EIS takes it at
its draws (:meth:`path_transition`) with kernels over two consecutive states
(:mod:`smle.engine.eis_pairs`).
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from smle import params as P
from smle.engine.exact import PeriodTransition
from smle.models import register
from smle.models.base import Model
from smle.models.sv import LOG_2PI, LogVarianceState


@register
@dataclasses.dataclass(frozen=True)
class LeverageStochasticVolatility(LogVarianceState):
    name = "sv-leverage"
    summary = "log-normal stochastic volatility with leverage (Yu 2005): corr(eps_t, eta_{t+1}) = delta"
    equations = ("y_t = exp(x_t/2) eps_t; x_{t+1} - mu = phi (x_t - mu) + sigma_eta eta_{t+1}, "
                 "corr(eps_t, eta_{t+1}) = delta")
    expects_returns = True
    transition_uses_data = True
    independent_params = Model.independent_params  # no independent case: phi = 0 leaves the leverage term

    def constraints(self):
        return {**self.state_constraints(), "delta": P.interval(-1.0, 1.0, "leverage correlation")}

    def log_obs_density(self, params, data, x):
        return -0.5 * (LOG_2PI + x + data[:, None] ** 2 * jnp.exp(-x))

    def path_transition(self, params, data, x_from) -> PeriodTransition:
        """x_{t+1} given x_t = x_from[t - 1] (T - 1, S) and y_t, t = 1..T-1: means (T - 1, S), sds (T - 1,)."""
        mu, phi, sigma, delta = params["mu"], params["phi"], params["sigma_eta"], params["delta"]
        shock = data[:-1, None] * jnp.exp(-0.5 * x_from)  # eps_t at each state
        mean = mu + phi * (x_from - mu) + delta * sigma * shock
        sd = jnp.broadcast_to(sigma * jnp.sqrt(1.0 - delta**2), (data.shape[0] - 1,))
        return PeriodTransition(mean, sd)

    def period_transition(self, params, data, grid) -> PeriodTransition:
        """x_{t+1} given x_t = grid[j] and y_t, for t = 1..T-1: means (T - 1, G), sds (T - 1,)."""
        return self.path_transition(params, data, jnp.broadcast_to(grid, (data.shape[0] - 1, grid.shape[0])))

    def simulate(self, params, n_periods, key):
        mu, phi, sigma, delta = (jnp.asarray(params[k], float) for k in ("mu", "phi", "sigma_eta", "delta"))
        start_key, eps_key, z_key = jax.random.split(key, 3)
        state = self.latent(params)
        x1 = state.init_mean + jnp.sqrt(state.init_var) * jax.random.normal(start_key)
        eps = jax.random.normal(eps_key, (n_periods,))
        eta = delta * eps + jnp.sqrt(1.0 - delta**2) * jax.random.normal(z_key, (n_periods,))  # eta_{t+1} with eps_t

        def step(x, shocks):
            e, n = shocks
            return mu + phi * (x - mu) + sigma * n, (x, jnp.exp(0.5 * x) * e)

        _, (x, y) = jax.lax.scan(step, x1, (eps, eta))
        return y, x

    def simulate_ahead(self, params, y, x_last, n_periods, key):
        """Returns exp(x_t / 2) eps_t, variances exp(x_t) and states for T+1..T+n, one path per
        draw ``x_last`` of x_T. The first transition uses the data: eps_T = y_T exp(-x_T / 2) at
        each draw, so x_{T+1} | x_T, y_T is the Gaussian of the module docstring; later steps
        draw eta_{t+1} = delta eps_t + sqrt(1 - delta^2) z_{t+1} with the simulated eps_t, as in
        :meth:`simulate`. The random streams are those of ``sv``'s hook, so delta = 0 gives its paths."""
        mu, phi, sigma, delta = (jnp.asarray(params[k], float) for k in ("mu", "phi", "sigma_eta", "delta"))
        state_key, error_key = jax.random.split(key)
        x_last = jnp.asarray(x_last, float)
        z = jax.random.normal(state_key, (n_periods,) + x_last.shape)
        eps = self.return_errors(params, error_key, z.shape)
        eps_last = jnp.ravel(jnp.asarray(y, float))[-1] * jnp.exp(-0.5 * x_last)
        previous = jnp.concatenate([eps_last[None], eps[:-1]])  # eps_t paired with the step to x_{t+1}

        def step(x, shocks):
            e, noise = shocks
            following = mu + phi * (x - mu) + sigma * (delta * e + jnp.sqrt(1.0 - delta**2) * noise)
            return following, following

        x = jax.lax.scan(step, x_last, (previous, z))[1]
        return jnp.exp(0.5 * x) * eps, jnp.exp(x), x

    def start_params(self, y):
        y = np.asarray(y, float)
        return {"mu": float(np.log(np.var(y))), "phi": 0.95, "sigma_eta": 0.25, "delta": -0.3}

    def obs_cdf(self, params, data, x):
        from smle.distributions import normal_cdf  # here, not at the top: keeps this hook self-contained

        return normal_cdf(data[:, None] * jnp.exp(-0.5 * x))
