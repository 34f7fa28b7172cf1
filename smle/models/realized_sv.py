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

The option ``measurement`` chooses the second series' equation: ``"lognormal"`` (above, the
default), ``"gamma"`` (a realized variance from ``n_intraday`` intraday returns) or
``"log-range"`` (the day's high-low range), from :mod:`smle.models.measurements`; the series is
given in levels in every case.

:func:`observations` stacks a return series and a realized-measure series with a check that
their lengths agree.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine import latent
from smle.errors import SmleInputError
from smle.models import register
from smle.models.measurements import (
    MEASUREMENT_LABELS, check_measurement, measurement_cdf, measurement_constraints, measurement_log_density,
    measurement_log_variance_guess, measurement_start, simulate_measurement,
)
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
    """See the module docstring.

    Attributes:
      measurement: the second series' equation (:mod:`smle.models.measurements`): "lognormal"
        (log RM_t = xi + x_t + u_t, the default), "gamma" (a realized variance from
        ``n_intraday`` intraday returns, RV_t | x_t ~ Gamma(M/2, scale 2 xi exp(x_t) / M)) or
        "log-range" (the day's high-low range of log prices in the unit of the returns,
        log range_t ~ N(x_t / 2 + E[log R] + xi, sigma_u^2), Alizadeh, Brandt and Diebold 2002;
        from ``smle prepare``: sqrt(4 ln 2 parkinson_pct2), see
        :func:`smle.models.measurements.range_from_parkinson`).
      n_intraday: M, intraday returns per day in the realized variance (gamma only).
    """

    measurement: str = "lognormal"
    n_intraday: int = 78

    name = "realized-sv"
    summary = "stochastic volatility of returns and a log realized measure with a bias (realized SV)"
    equations = (
        "r_t = exp(x_t/2) eps_t; log RM_t = xi + x_t + u_t, u_t ~ N(0, sigma_u^2); "
        "x_t - mu = phi (x_{t-1} - mu) + sigma_eta eta_t"
    )
    n_series = 2
    series_labels = ("return", "realized measure")

    def __post_init__(self):
        check_measurement(self.name, self.measurement, self.n_intraday)
        object.__setattr__(self, "series_labels", ("return", MEASUREMENT_LABELS[self.measurement]))

    def constraints(self):
        return {**self.state_constraints(), **measurement_constraints(self.measurement)}

    def check_data(self, y):
        check_realized_column(self.name, y[:, 1])
        return y

    def prepare(self, params, y):
        return y[:, 0], jnp.log(y[:, 1])

    def log_obs_density(self, params, data, x):
        returns, log_measure = data
        return_part = -0.5 * (LOG_2PI + x + returns[:, None] ** 2 * jnp.exp(-x))
        return return_part + measurement_log_density(self.measurement, log_measure[:, None], x, params,
                                                     self.n_intraday)

    def mode_guess(self, params, data):
        _, log_measure = data
        return measurement_log_variance_guess(self.measurement, log_measure, params)

    def simulate(self, params, n_periods, key):
        state_key, return_key, measure_key = jax.random.split(key, 3)
        x = latent.sample_path(self.latent(params), state_key, n_periods)
        r = jnp.exp(0.5 * x) * jax.random.normal(return_key, (n_periods,))
        measure = simulate_measurement(self.measurement, x, params, self.n_intraday, measure_key)
        return jnp.column_stack([r, measure]), x

    def start_params(self, y):
        y = np.asarray(y, float)
        log_measure = np.log(y[:, 1])
        mu = float(np.log(np.var(y[:, 0])))
        return {"mu": mu, "phi": 0.95, "sigma_eta": 0.2, **measurement_start(self.measurement, log_measure, mu)}

    def obs_cdf(self, params, data, x):
        """CDFs of the return and of the realized measure given x_t, shape (T, S, 2)."""
        from smle.distributions import normal_cdf  # here, not at the top: keeps this hook self-contained

        returns, log_measure = data
        return_cdf = normal_cdf(returns[:, None] * jnp.exp(-0.5 * x))
        measure_cdf = measurement_cdf(self.measurement, log_measure[:, None], x, params, self.n_intraday)
        return jnp.stack([return_cdf, measure_cdf], axis=-1)
