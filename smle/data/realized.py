"""Realized measures of one session's variance from intraday prices sampled on a grid.

Prices are sampled by the previous-tick rule: the price at a grid time is the last one
observed at or before it (the session's first price for grid times before any observation).
The grid of a session of length ``L`` with interval ``delta`` is ``0, delta, 2 delta, ...``
up to ``L`` (the close is always the last point, so every grid covers the whole session).

* Realized variance: the sum of squared grid returns.
* Bipower variation: ``(pi/2) * M/(M-1) * sum_j |r_j| |r_{j-1}|`` over the ``M`` grid returns.
  ``mu_1^{-2} = pi/2`` is the scaling of Barndorff-Nielsen and Shephard (2004); the factor
  ``M/(M-1)`` corrects for the one term lost to the lag, so that the measure is unbiased for
  a constant volatility. Unlike realized variance it is robust to jumps.
* Subsampled realized variance: the average of realized variances over grids shifted by
  ``k delta / S``, ``k = 0..S-1`` (each shifted grid still starts at the open and ends at the
  close), which uses all the data while keeping the interval.

References:
  Andersen, T. G., Bollerslev, T., Diebold, F. X. and Labys, P. (2001). The distribution of
  realized exchange rate volatility. JASA 96, 42-55.
  Barndorff-Nielsen, O. E. and Shephard, N. (2004). Power and bipower variation with
  stochastic volatility and jumps. Journal of Financial Econometrics 2, 1-37.
  Zhang, L., Mykland, P. A. and Ait-Sahalia, Y. (2005). A tale of two time scales. JASA 100,
  1394-1411 (the averaged, subsampled realized variance).
"""

from __future__ import annotations

import numpy as np

from smle.errors import SmleInputError, describe

HALF_PI = np.pi / 2.0


def _as_returns(returns) -> np.ndarray:
    try:
        values = np.asarray(returns, dtype=float)
    except (TypeError, ValueError):
        values = None
    if values is None or values.ndim == 0:
        raise SmleInputError(f"returns={describe(returns)} is not accepted; give numbers (an "
                             f"array of returns)")
    return values


def realized_variance(returns, axis: int = -1) -> np.ndarray:
    """Sum of squared returns along ``axis`` (unit: the returns' unit squared)."""
    returns = _as_returns(returns)
    return np.sum(returns * returns, axis=axis)


def bipower_variation(returns, axis: int = -1) -> np.ndarray:
    """Bipower variation along ``axis``: ``(pi/2) M/(M-1) sum |r_j||r_{j-1}|``.

    References: Barndorff-Nielsen and Shephard (2004).
    """
    size = np.abs(np.moveaxis(_as_returns(returns), axis, -1))
    count = size.shape[-1]
    if count < 2:
        raise SmleInputError(f"returns has {count} value(s) along axis {axis}; bipower "
                             f"variation needs at least 2")
    return HALF_PI * count / (count - 1) * np.sum(size[..., 1:] * size[..., :-1], axis=-1)


def sampling_grid(session_seconds: float, interval_seconds: float,
                  offset_seconds: float = 0.0) -> np.ndarray:
    """Grid times in seconds from the open: ``0``, then ``offset + k interval`` below the
    session length, then the session length (the close)."""
    inner = np.arange(offset_seconds, session_seconds, interval_seconds)
    inner = inner[(inner > 0.0) & (inner < session_seconds)]
    return np.concatenate([[0.0], inner, [float(session_seconds)]])


def sample_on_grid(day: np.ndarray, seconds: np.ndarray, log_price: np.ndarray,
                   first_log_price: np.ndarray, grid: np.ndarray) -> np.ndarray:
    """Previous-tick log prices on the grid, one row per day.

    Args:
      day: each observation's day number ``0..n_days-1``, non-decreasing.
      seconds: each observation's time in seconds from its session's open, increasing
        within a day and inside ``[0, grid[-1]]``.
      log_price: each observation's log price.
      first_log_price: each day's log price at the open, shape ``(n_days,)``.
      grid: grid times from :func:`sampling_grid`.

    Returns:
      An array ``(n_days, len(grid))`` of log prices.
    """
    n_days, width = len(first_log_price), len(grid)
    # The first grid point at or after each observation: that observation is the latest one
    # at or before this grid point unless a later observation falls in the same slot.
    slot = np.searchsorted(grid, seconds, side="left")
    cell = day * width + slot
    last = np.r_[cell[1:] != cell[:-1], True]
    values = np.full(n_days * width, np.nan)
    values[cell[last]] = log_price[last]
    values = values.reshape(n_days, width)
    values[:, 0] = first_log_price
    # Carry each price forward over the empty grid points (vectorised forward fill).
    filled = np.where(np.isnan(values), 0, np.arange(width)[None, :])
    np.maximum.accumulate(filled, axis=1, out=filled)
    return np.take_along_axis(values, filled, axis=1)


def grid_returns(day, seconds, log_price, first_log_price, session_seconds, interval_seconds,
                 offset_seconds=0.0, scale=100.0) -> np.ndarray:
    """Grid returns (scaled, e.g. to percent), shape ``(n_days, n_intervals)``."""
    grid = sampling_grid(session_seconds, interval_seconds, offset_seconds)
    prices = sample_on_grid(day, seconds, log_price, first_log_price, grid)
    return scale * np.diff(prices, axis=1)


def subsampled_realized_variance(day, seconds, log_price, first_log_price, session_seconds,
                                 interval_seconds, subsamples=5, scale=100.0) -> np.ndarray:
    """Average of realized variances over ``subsamples`` grids shifted by
    ``k interval / subsamples`` (Zhang, Mykland and Ait-Sahalia 2005)."""
    total = 0.0
    for k in range(subsamples):  # a loop over a handful of offsets, not over rows
        returns = grid_returns(day, seconds, log_price, first_log_price, session_seconds,
                               interval_seconds, k * interval_seconds / subsamples, scale)
        total = total + realized_variance(returns)
    return total / subsamples
