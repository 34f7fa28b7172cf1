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
import pandas as pd

from smle.data import units
from smle.errors import SmleInputError

LOG_2 = np.log(2.0)


def _rows(mask: np.ndarray, labels) -> str:
    """The first few offending rows: 0-based positions, with the labels of a Series."""
    where = np.flatnonzero(mask)
    shown = []
    for i in where[:5]:
        label = f" ({labels[i]})" if labels is not None else ""
        shown.append(f"{int(i)}{label}")
    return f"row(s) {', '.join(shown)}{', ...' if len(where) > 5 else ''} ({len(where)} in all)"


def _checked_logs(**prices) -> list[np.ndarray]:
    """Log prices after checking the bar rules; an error names the argument and the rows.

    Prices must be finite and positive, with low <= high and open and close inside
    [low, high]: otherwise an estimator returns NaN, a number for an impossible day, or a
    negative variance.
    """
    labels = None
    arrays = {}
    for name, price in prices.items():
        if labels is None and isinstance(price, pd.Series):
            labels = [str(getattr(label, "date", lambda: label)()) for label in price.index]
        try:
            arrays[name] = np.asarray(price, dtype=float)
        except (TypeError, ValueError):
            raise SmleInputError(f"{name} must be numbers (prices); got "
                                 f"{type(price).__name__}") from None
    shapes = {name: value.shape for name, value in arrays.items()}
    if len(set(shapes.values())) != 1:
        raise SmleInputError(f"prices must have one shape; got {shapes}")
    for name, value in arrays.items():
        bad = ~(np.isfinite(value) & (value > 0))
        if bad.any():
            first = value[np.flatnonzero(bad)[0]]
            raise SmleInputError(
                f"{name} has a non-positive or missing price at {_rows(bad, labels)}, first "
                f"{first!r}; accepted: finite positive prices (logs are taken of them)")
    high, low = arrays["high"], arrays["low"]
    bad = high < low
    if bad.any():
        i = np.flatnonzero(bad)[0]
        raise SmleInputError(
            f"high is below low at {_rows(bad, labels)}, first high = {high[i]!r} < low = "
            f"{low[i]!r}; accepted: low <= high on every day")
    for name in ("open_price", "close"):
        if name in arrays:
            value = arrays[name]
            bad = (value < low) | (value > high)
            if bad.any():
                i = np.flatnonzero(bad)[0]
                raise SmleInputError(
                    f"{name} lies outside [low, high] at {_rows(bad, labels)}, first "
                    f"{value[i]!r} outside [{low[i]!r}, {high[i]!r}]; accepted: low <= "
                    f"{name} <= high on every day")
    return [np.log(value) for value in arrays.values()]


def parkinson(high, low, unit: str = "percent") -> np.ndarray:
    """Parkinson (1980) variance from the day's high and low, in ``unit`` squared."""
    log_high, log_low = _checked_logs(high=high, low=low)
    return units.scale(unit) ** 2 * (log_high - log_low) ** 2 / (4.0 * LOG_2)


def garman_klass(open_price, high, low, close, unit: str = "percent") -> np.ndarray:
    """Garman-Klass (1980) variance from open, high, low and close, in ``unit`` squared."""
    log_open, log_high, log_low, log_close = _checked_logs(open_price=open_price, high=high,
                                                           low=low, close=close)
    up, down, change = log_high - log_open, log_low - log_open, log_close - log_open
    return units.scale(unit) ** 2 * (0.5 * (up - down) ** 2 - (2.0 * LOG_2 - 1.0) * change ** 2)


def rogers_satchell(open_price, high, low, close, unit: str = "percent") -> np.ndarray:
    """Rogers-Satchell (1991) variance from open, high, low and close, in ``unit`` squared."""
    log_open, log_high, log_low, log_close = _checked_logs(open_price=open_price, high=high,
                                                           low=low, close=close)
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
