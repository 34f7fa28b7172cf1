"""Realized stochastic volatility: returns and a log realized measure sharing the log variance
(Takahashi, Omori and Watanabe 2009, Computational Statistics and Data Analysis 53, without
the leverage term).

``realized-sv``::

    r_t      = exp(x_t / 2) eps_t,              eps_t ~ N(0, 1)
    log RM_t = xi + x_t + u_t,                  u_t ~ N(0, sigma_u^2), independent of eps_t
    x_t - mu = phi (x_{t-1} - mu) + sigma_eta eta_t,   x_1 from the stationary law

Observations ``y`` have shape (T, 2): column 0 the return ``r_t``, column 1 the realized
measure ``RM_t`` *in levels* (a realized variance, positive, in the squared unit of the
returns); the model takes its logarithm. ``xi`` is the bias of the log realized measure as an
estimate of the log variance (negative when the measure misses the overnight part). The
log-likelihood is that of the data as given, ``(r_t, RM_t)``: it includes the Jacobian
``-log RM_t`` of the log transform (a constant in the parameters).

:func:`observations` stacks a return series and a realized-measure series with a check that
their lengths agree.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from smle import params as P
from smle.engine import latent
from smle.errors import SmleInputError
from smle.models import register
from smle.models.sv import LogVarianceState

LOG_2PI = float(np.log(2 * np.pi))


def _rows(indices) -> str:
    shown = ", ".join(str(int(i)) for i in indices[:10])
    return shown + (" ..." if len(indices) > 10 else "")


def observations(returns, realized_measure) -> np.ndarray:
    """The (T, 2) observation array of ``realized-sv`` from its two series.

    Args:
      returns: daily returns, shape (T,).
      realized_measure: the realized measure of the same days in levels (positive), shape (T,).

    Raises:
      SmleInputError: if either is not one-dimensional or their lengths differ.
    """
    r = np.asarray(returns, dtype=float)
    rm = np.asarray(realized_measure, dtype=float)
    for label, array in (("returns", r), ("realized_measure", rm)):
        if array.ndim != 1:
            raise SmleInputError(f"{label} has shape {array.shape}; accepted: a one-dimensional series")
    if r.shape[0] != rm.shape[0]:
        raise SmleInputError(
            f"returns has {r.shape[0]} periods but realized_measure has {rm.shape[0]}; "
            "accepted: the two series of the same days, equal lengths"
        )
    return np.column_stack([r, rm])


def check_realized_column(model_name: str, column: np.ndarray, index: int = 1) -> None:
    """Raise :class:`SmleInputError` naming the rows where a realized measure is not positive."""
    bad = np.flatnonzero(~(column > 0))
    if bad.size:
        raise SmleInputError(
            f"y[:, {index}] (the realized measure, in levels) is zero or negative at {bad.size} row(s) "
            f"{_rows(bad)} (values {', '.join(repr(float(column[i])) for i in bad[:3])}); model "
            f"'{model_name}' takes its logarithm, so accepted: positive values only "
            "(drop those days or give a positive measure)"
        )


@register
@dataclasses.dataclass(frozen=True)
class RealizedStochasticVolatility(LogVarianceState):
    name = "realized-sv"
    summary = "stochastic volatility of returns and a log realized measure with a bias (realized SV)"
    equations = (
        "r_t = exp(x_t/2) eps_t; log RM_t = xi + x_t + u_t, u_t ~ N(0, sigma_u^2); "
        "x_t - mu = phi (x_{t-1} - mu) + sigma_eta eta_t"
    )
    n_series = 2

    def constraints(self):
        return {
            **self.state_constraints(),
            "xi": P.real("bias of the log realized measure"),
            "sigma_u": P.positive("noise scale of the log realized measure"),
        }

    def check_data(self, y):
        check_realized_column(self.name, y[:, 1])
        return y

    def prepare(self, params, y):
        return y[:, 0], jnp.log(y[:, 1])

    def log_obs_density(self, params, data, x):
        returns, log_measure = data
        return_part = -0.5 * (LOG_2PI + x + returns[:, None] ** 2 * jnp.exp(-x))
        sigma_u = params["sigma_u"]
        residual = (log_measure[:, None] - params["xi"] - x) / sigma_u
        measure_part = -0.5 * (LOG_2PI + residual**2) - jnp.log(sigma_u) - log_measure[:, None]
        return return_part + measure_part

    def mode_guess(self, params, data):
        _, log_measure = data
        return log_measure - params["xi"]

    def simulate(self, params, n_periods, key):
        state_key, return_key, measure_key = jax.random.split(key, 3)
        x = latent.sample_path(self.latent(params), state_key, n_periods)
        r = jnp.exp(0.5 * x) * jax.random.normal(return_key, (n_periods,))
        log_measure = params["xi"] + x + params["sigma_u"] * jax.random.normal(measure_key, (n_periods,))
        return jnp.column_stack([r, jnp.exp(log_measure)]), x

    def start_params(self, y):
        y = np.asarray(y, float)
        log_measure = np.log(y[:, 1])
        mu = float(np.log(np.var(y[:, 0])))
        return {"mu": mu, "phi": 0.95, "sigma_eta": 0.2,
                "xi": float(np.mean(log_measure) - mu), "sigma_u": float(0.5 * np.std(log_measure))}

    def obs_cdf(self, params, data, x):
        """CDFs of the return and of the realized measure given x_t, shape (T, S, 2)."""
        from smle.distributions import normal_cdf  # here, not at the top: keeps this hook self-contained

        returns, log_measure = data
        return_cdf = normal_cdf(returns[:, None] * jnp.exp(-0.5 * x))
        measure_cdf = normal_cdf((log_measure[:, None] - params["xi"] - x) / params["sigma_u"])
        return jnp.stack([return_cdf, measure_cdf], axis=-1)
