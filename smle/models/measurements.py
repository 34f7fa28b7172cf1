"""Measurement densities of a second observed series given the day's log variance.

Each function is the log-density of one day's measurement given ``log_variance`` = h_t, the log
of the day's return variance (a latent log variance, or log h_t of a GARCH scale), as a pure
JAX function: it broadcasts over its arguments (so a (T, 1) measurement against (T, S) paths
gives (T, S)), jits, and is differentiable in h_t and in its parameters. None checks its
parameters; callers validate them.

* :func:`log_normal_measure_log_density`: ``log RM_t = xi + h_t + u_t``, u_t ~ N(0, sigma_u^2),
  the realized-measure equation of ``realized-sv`` and ``garch-mix`` (Takahashi, Omori and
  Watanabe 2009, Computational Statistics and Data Analysis 53), as a density of RM_t in levels.
* :func:`gamma_measure_log_density`: a realized variance from M intraday returns,
  ``RV_t | h_t ~ Gamma(shape M/2, scale 2 xi exp(h_t) / M)``. If the day's M intraday returns
  are independent N(0, xi exp(h_t) / M), RV_t (their sum of squares) is xi exp(h_t) / M times a
  chi-square with M degrees of freedom, which is this law exactly; E[RV_t] = xi exp(h_t) and
  Var[RV_t] = 2 (xi exp(h_t))^2 / M. ``xi`` is a multiplicative bias (xi < 1 when the measure
  misses the overnight part).
* :func:`log_range_log_density`: the log of the day's high-low range of log prices,
  ``log range_t ~ N(h_t / 2 + E[log R] + bias, Var[log R])`` (Alizadeh, Brandt and Diebold
  2002, J. Finance 57), where R is the range of a standard Brownian motion on [0, 1]: for a
  driftless Brownian log price with daily variance exp(h_t), the range is exp(h_t / 2) R, so
  ``log range = h_t / 2 + log R`` exactly; the normal law for log R is the approximation.

The constants E[log R] = :data:`LOG_RANGE_MEAN` and Var[log R] = :data:`LOG_RANGE_VARIANCE` are
computed once on import (:func:`brownian_log_range_moments`) from Feller's (1951) density of
the range,

    f(r) = 8 sum_{k>=1} (-1)^{k-1} k^2 phi(k r),                             r > 0,

which converges fast for large r, and for small r from its Jacobi theta transform (Poisson
summation of the same series),

    f(r) = (8 / r^3) sum_{n>=0} exp(-c_n / r^2) (2 c_n / r^2 - 1),      c_n = pi^2 (2n + 1)^2 / 2,

by the trapezoidal rule in u = log r (the integrand decays doubly exponentially at both ends,
so the rule converges exponentially). Values: E[log R] = 0.425676, Var[log R] = 0.082181
(sd 0.286672); Alizadeh, Brandt and Diebold (2002) quote 0.43 and 0.29^2 (recalled from
memory). ``tests/test_measurements.py`` checks the density against Feller's moments
E[R] = 2 sqrt(2 / pi) and E[R^2] = 4 log 2 and the constants against simulated Brownian paths.

References: Feller, W. (1951). The asymptotic distribution of the range of sums of independent
random variables. Annals of Mathematical Statistics 22, 427-432. Alizadeh, S., Brandt, M. W.
and Diebold, F. X. (2002). Range-based estimation of stochastic volatility models. Journal of
Finance 57, 1047-1091.
"""

from __future__ import annotations

import math

import jax.numpy as jnp
import numpy as np
from jax.scipy.special import gammaln

__all__ = [
    "LOG_RANGE_MEAN",
    "LOG_RANGE_VARIANCE",
    "brownian_range_density",
    "brownian_log_range_moments",
    "log_normal_measure_log_density",
    "gamma_measure_log_density",
    "log_range_log_density",
    "MEASUREMENTS",
    "check_measurement",
    "measurement_constraints",
    "measurement_log_density",
    "measurement_cdf",
    "simulate_measurement",
    "measurement_log_variance_guess",
    "measurement_start",
    "range_from_parkinson",
]

_LOG_2PI = math.log(2.0 * math.pi)
# below this r the theta-transformed series is used, above it Feller's series; at r = 1.3 both
# have converged to float64 rounding with the term counts below (first omitted terms: Feller's
# k = 41 term ~ exp(-1420), the transform's n = 20 term ~ exp(-4600))
_RANGE_SWITCH = 1.3
_FELLER_TERMS = 40
_THETA_TERMS = 20


def brownian_range_density(r) -> np.ndarray:
    """Density of the range R = max - min of a standard Brownian motion on [0, 1] (NumPy).

    Feller (1951); see the module docstring for the two series. Args: r > 0 (array-like).
    """
    r = np.asarray(r, dtype=float)
    small = np.minimum(r, _RANGE_SWITCH)[..., None]
    c = 0.5 * (math.pi * (2 * np.arange(_THETA_TERMS) + 1)) ** 2
    theta = 8.0 / small[..., 0] ** 3 * np.sum(np.exp(-c / small**2) * (2.0 * c / small**2 - 1.0), axis=-1)
    large = np.maximum(r, _RANGE_SWITCH)[..., None]
    k = np.arange(1, _FELLER_TERMS + 1)
    feller = 8.0 * np.sum((-1.0) ** (k - 1) * k**2 * np.exp(-0.5 * (k * large) ** 2 - 0.5 * _LOG_2PI), axis=-1)
    return np.where(r < _RANGE_SWITCH, theta, feller)


def brownian_log_range_moments(n_nodes: int = 3001) -> tuple[float, float]:
    """(E[log R], Var[log R]) of the Brownian range on [0, 1], by the trapezoidal rule in log r.

    The density of u = log R is f(e^u) e^u; on [-3, 2.7] it is below 1e-50 outside (f(e^-3) ~
    exp(-1990), f(e^2.7) ~ 1e-32), and with the default 3001 nodes the rule reproduces
    E[R] = 2 sqrt(2/pi) and E[R^2] = 4 log 2 to about 1e-14.
    """
    u = np.linspace(-3.0, 2.7, n_nodes)
    weights = np.full(n_nodes, u[1] - u[0])
    weights[[0, -1]] *= 0.5
    mass = brownian_range_density(np.exp(u)) * np.exp(u) * weights
    mean = float(np.sum(mass * u))
    return mean, float(np.sum(mass * (u - mean) ** 2))


LOG_RANGE_MEAN, LOG_RANGE_VARIANCE = brownian_log_range_moments()


def log_normal_measure_log_density(measure, log_variance, xi, sigma_u):
    """log p(RM_t | h_t) for ``log RM_t = xi + h_t + u_t``, u_t ~ N(0, sigma_u^2).

    Args:
      measure: the realized measure in levels (> 0, squared return units).
      log_variance: h_t, the log of the day's return variance.
      xi: bias of the log measure (real); sigma_u: its noise scale (> 0).

    Returns:
      The log-density of RM_t in levels (the Jacobian -log RM_t included), broadcast.
    """
    log_measure = jnp.log(measure)
    z = (log_measure - xi - log_variance) / sigma_u
    return -0.5 * (_LOG_2PI + z * z) - jnp.log(sigma_u) - log_measure


def gamma_measure_log_density(measure, log_variance, xi, n_intraday):
    """log p(RV_t | h_t) for ``RV_t ~ Gamma(shape M/2, scale 2 xi exp(h_t) / M)``.

    Args:
      measure: the realized variance RV_t in levels (> 0, squared return units).
      log_variance: h_t, the log of the day's return variance.
      xi: multiplicative bias (> 0): E[RV_t | h_t] = xi exp(h_t).
      n_intraday: M > 0, the number of intraday returns (may be non-integer as a
        degrees-of-freedom parameter).

    Returns:
      The log-density, broadcast over the arguments.
    """
    shape = 0.5 * jnp.asarray(n_intraday, dtype=float)
    log_scale = jnp.log(xi) + log_variance - jnp.log(shape)  # 2 xi exp(h) / M
    log_measure = jnp.log(measure)
    return (shape - 1.0) * log_measure - measure * jnp.exp(-log_scale) - gammaln(shape) - shape * log_scale


def log_range_log_density(log_range, log_variance, bias=0.0, variance=LOG_RANGE_VARIANCE):
    """log p(log range_t | h_t) for ``log range_t ~ N(h_t / 2 + LOG_RANGE_MEAN + bias, variance)``.

    Alizadeh, Brandt and Diebold (2002). The range is that of log prices over the day, in the
    unit of the returns (so that exp(h_t) is the daily return variance).

    Args:
      log_range: the log of the day's high-low range of log prices.
      log_variance: h_t, the log of the day's return variance.
      bias: shift of the mean (real; 0 for a continuously observed Brownian day; negative when
        discrete sampling or closed hours shorten the observed range).
      variance: the variance of log range_t given h_t (> 0; default Var[log R] of the Brownian
        range, :data:`LOG_RANGE_VARIANCE`).

    Returns:
      The log-density of the log range (no Jacobian: the density of log range_t itself).
    """
    residual = log_range - 0.5 * log_variance - LOG_RANGE_MEAN - bias
    return -0.5 * (_LOG_2PI + jnp.log(variance) + residual * residual / variance)


# -- the measurement equation as a model option -------------------------------------------------
# ``realized-sv`` and ``garch-mix`` take ``measurement`` = one of MEASUREMENTS for their second
# observed series, always given in levels (positive): a realized measure, a realized variance
# from M intraday returns, or the day's high-low range of log prices in the unit of the returns.
# The likelihood is that of the series as given (levels): the log-normal and log-range
# densities carry the Jacobian -log y of the log transform.

MEASUREMENTS = ("lognormal", "gamma", "log-range")
MEASUREMENT_LABELS = {"lognormal": "realized measure", "gamma": "realized variance", "log-range": "high-low range"}


def check_measurement(model_name: str, measurement, n_intraday) -> None:
    """Raise :class:`SmleInputError` for an unknown measurement or a bad number of intraday returns."""
    from smle.errors import SmleInputError

    if measurement not in MEASUREMENTS:
        raise SmleInputError(f"measurement = {measurement!r} is not accepted by model '{model_name}'; accepted: "
                             f"{', '.join(map(repr, MEASUREMENTS))}")
    if isinstance(n_intraday, bool) or not isinstance(n_intraday, int) or n_intraday < 1:
        raise SmleInputError(f"n_intraday = {n_intraday!r} is not accepted; accepted: an integer >= 1 (the number "
                             "of intraday returns summed into the realized variance, e.g. 78 five-minute returns)")


def measurement_constraints(measurement: str) -> dict:
    """The parameters of the measurement equation: ``xi`` (bias) and, but for gamma, ``sigma_u``."""
    from smle import params as P

    if measurement == "gamma":
        return {"xi": P.positive("multiplicative bias of the realized variance, E[RV | h] = xi exp(h)")}
    if measurement == "log-range":
        return {"xi": P.real("shift of the mean log range (0 for a continuously observed Brownian day)"),
                "sigma_u": P.positive("standard deviation of the log range given the variance (Brownian: 0.287)")}
    return {"xi": P.real("bias of the log realized measure"),
            "sigma_u": P.positive("noise scale of the log realized measure")}


def measurement_log_density(measurement: str, log_measure, log_variance, params, n_intraday: int):
    """log p(y_t | h_t) of the second series in levels, from its log ``log_measure``; broadcast."""
    xi = params["xi"]
    if measurement == "gamma":
        return gamma_measure_log_density(jnp.exp(log_measure), log_variance, xi, n_intraday)
    if measurement == "log-range":
        return log_range_log_density(log_measure, log_variance, xi, params["sigma_u"] ** 2) - log_measure
    return log_normal_measure_log_density(jnp.exp(log_measure), log_variance, xi, params["sigma_u"])


def measurement_cdf(measurement: str, log_measure, log_variance, params, n_intraday: int):
    """F(y_t | h_t) of the second series (for PITs); broadcast."""
    from jax.scipy.special import gammainc

    from smle.distributions import normal_cdf

    if measurement == "gamma":
        shape = 0.5 * n_intraday
        return gammainc(shape, jnp.exp(log_measure - jnp.log(params["xi"]) - log_variance) * shape)
    if measurement == "log-range":
        mean = 0.5 * log_variance + LOG_RANGE_MEAN + params["xi"]
        return normal_cdf((log_measure - mean) / params["sigma_u"])
    return normal_cdf((log_measure - params["xi"] - log_variance) / params["sigma_u"])


def simulate_measurement(measurement: str, log_variance, params, n_intraday: int, key):
    """The second series in levels given log variances (T,), drawn from its measurement law."""
    import jax

    xi = params["xi"]
    if measurement == "gamma":
        shape = 0.5 * n_intraday
        return jax.random.gamma(key, shape, jnp.shape(log_variance)) * xi * jnp.exp(log_variance) / shape
    noise = jax.random.normal(key, jnp.shape(log_variance))
    if measurement == "log-range":
        return jnp.exp(0.5 * log_variance + LOG_RANGE_MEAN + xi + params["sigma_u"] * noise)
    return jnp.exp(xi + log_variance + params["sigma_u"] * noise)


def measurement_log_variance_guess(measurement: str, log_measure, params):
    """h_t suggested by the second series alone (a start for the posterior mode)."""
    if measurement == "gamma":
        return log_measure - jnp.log(params["xi"])
    if measurement == "log-range":
        return 2.0 * (log_measure - LOG_RANGE_MEAN - params["xi"])
    return log_measure - params["xi"]


def measurement_start(measurement: str, log_measure: np.ndarray, log_variance: float) -> dict:
    """Start values of the measurement parameters, from the log series and a typical log variance."""
    if measurement == "gamma":
        return {"xi": float(np.exp(np.mean(log_measure) - log_variance))}
    if measurement == "log-range":
        return {"xi": float(np.mean(log_measure) - 0.5 * log_variance - LOG_RANGE_MEAN),
                "sigma_u": float(np.sqrt(LOG_RANGE_VARIANCE))}
    return {"xi": float(np.mean(log_measure) - log_variance), "sigma_u": float(0.5 * np.std(log_measure))}


def range_from_parkinson(parkinson) -> np.ndarray:
    """The high-low range of log prices from the Parkinson variance of ``smle prepare``.

    ``smle prepare`` writes ``parkinson_pct2`` = (ln high - ln low)^2 / (4 ln 2) over the
    session, in percent squared; the range in percent (the unit of ``return_pct``) is
    sqrt(4 ln 2 parkinson_pct2). That is the series the "log-range" measurement takes.
    """
    return np.sqrt(4.0 * math.log(2.0) * np.asarray(parkinson, dtype=float))
