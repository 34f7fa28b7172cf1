"""Range-based estimators of one day's variance from its open, high, low and close.

All take prices (arrays or Series of equal length, one entry per day) and return the
variance of the day's log price over the session in ``unit`` squared (percent squared by
default). With ``u = ln(high/open)``, ``d = ln(low/open)``, ``c = ln(close/open)``:

* Parkinson: ``(u - d)^2 / (4 ln 2)``.
* Garman-Klass: ``0.5 (u - d)^2 - (2 ln 2 - 1) c^2`` (their practical form, nearly as
  efficient as their best analytic estimator).
* Rogers-Satchell: ``u (u - c) + d (d - c)``, unbiased also when the price has a drift.

Under a driftless Brownian motion with variance sigma^2 per day each is unbiased for
sigma^2, with variance about 0.407, 0.27 and 0.33 sigma^4, against 2 sigma^4 for the squared
open-to-close return. Ranges read from a discretely sampled path are too narrow, so these
estimators are biased low on sparse bars.

References:
  Parkinson, M. (1980). The extreme value method for estimating the variance of the rate of
  return. Journal of Business 53, 61-65.
  Garman, M. B. and Klass, M. J. (1980). On the estimation of security price volatilities
  from historical data. Journal of Business 53, 67-78.
  Rogers, L. C. G. and Satchell, S. E. (1991). Estimating variance from high, low and closing
  prices. Annals of Applied Probability 1, 504-512.
"""

from __future__ import annotations

import numpy as np

from smle.data import units

LOG_2 = np.log(2.0)


def _logs(*prices):
    return [np.log(np.asarray(price, dtype=float)) for price in prices]


def parkinson(high, low, unit: str = "percent") -> np.ndarray:
    """Parkinson (1980) variance from the day's high and low, in ``unit`` squared."""
    log_high, log_low = _logs(high, low)
    return units.scale(unit) ** 2 * (log_high - log_low) ** 2 / (4.0 * LOG_2)


def garman_klass(open_price, high, low, close, unit: str = "percent") -> np.ndarray:
    """Garman-Klass (1980) variance from open, high, low and close, in ``unit`` squared."""
    log_open, log_high, log_low, log_close = _logs(open_price, high, low, close)
    up, down, change = log_high - log_open, log_low - log_open, log_close - log_open
    return units.scale(unit) ** 2 * (0.5 * (up - down) ** 2 - (2.0 * LOG_2 - 1.0) * change ** 2)


def rogers_satchell(open_price, high, low, close, unit: str = "percent") -> np.ndarray:
    """Rogers-Satchell (1991) variance from open, high, low and close, in ``unit`` squared."""
    log_open, log_high, log_low, log_close = _logs(open_price, high, low, close)
    up, down, change = log_high - log_open, log_low - log_open, log_close - log_open
    return units.scale(unit) ** 2 * (up * (up - change) + down * (down - change))


ESTIMATORS = {"parkinson": parkinson, "garman_klass": garman_klass,
              "rogers_satchell": rogers_satchell}


def range_measures(bars, names=tuple(ESTIMATORS), unit: str = "percent") -> dict:
    """The named range estimators for a frame (or mapping) with open/high/low/close columns."""
    out = {}
    for name in names:
        if name == "parkinson":
            out[name] = parkinson(bars["high"], bars["low"], unit)
        else:
            out[name] = ESTIMATORS[name](bars["open"], bars["high"], bars["low"], bars["close"],
                                         unit)
    return out
