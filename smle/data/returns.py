"""Log returns from prices, in percent by default."""

from __future__ import annotations

import numpy as np
import pandas as pd

from smle.data import units
from smle.errors import SmleInputError, describe


def log_returns(prices, unit: str = "percent"):
    """Log returns ``scale * (ln p_t - ln p_{t-1})`` of a price series.

    Args:
      prices: positive prices, a 1-d array or a Series (in time order).
      unit: ``"percent"`` (default; scale 100) or ``"decimal"`` (scale 1).

    Returns:
      For an array, an array one shorter. For a Series, a Series named ``return_pct`` (or
      ``return_dec``) on the index from the second price on, with ``attrs["return_unit"]``.
    """
    scale = units.scale(unit)
    try:
        values = np.asarray(prices, dtype=float)
    except (TypeError, ValueError):
        raise SmleInputError(f"prices={describe(prices)} is not accepted; give positive numbers "
                             f"(a 1-d array or a Series)") from None
    if values.ndim != 1:
        raise SmleInputError(f"prices must be one-dimensional; got shape {values.shape}")
    bad = np.flatnonzero(~(np.isfinite(values) & (values > 0)))
    if len(bad):
        where = bad[0]
        label = f"; label {prices.index[where]}" if isinstance(prices, pd.Series) else ""
        raise SmleInputError(
            f"prices row {where} (0-based{label}): {values[where]!r}; rule broken: prices must "
            f"be finite and positive ({len(bad)} such row(s))")
    result = scale * np.diff(np.log(values))
    if isinstance(prices, pd.Series):
        series = pd.Series(result, index=prices.index[1:], name=units.return_name("return", unit))
        series.attrs["return_unit"] = units.describe_units(unit)["return_unit"]
        return series
    return result
