"""The Diebold-Mariano test of equal predictive accuracy of two score sequences.

For per-period scores s_a,t and s_b,t of two forecasts (log predictive densities: higher is
better), the loss differential d_t = s_a,t - s_b,t has mean zero under equal expected accuracy.
Diebold and Mariano (1995):

    DM = d_bar / sqrt(LRV / T),    LRV = gamma_0 + 2 sum_{k=1}^{L} (1 - k / (L + 1)) gamma_k,

with gamma_k = (1/T) sum_{t>k} (d_t - d_bar)(d_{t-k} - d_bar) the sample autocovariances and
Bartlett weights (Newey and West 1987), which keep LRV >= 0. DM is asymptotically N(0, 1).

Lag choice: ``lags=None`` takes L = floor(4 (T / 100)^(2/9)), the Newey-West (1994) plug-in
rule of thumb (common practice; 4 lags at T = 100, 7 at T = 1000). One-step log scores of
correct forecasts are martingale differences, for which L = 0 suffices (Diebold and Mariano's
h - 1 for horizon h); the default also guards against serially correlated differentials.

``small_sample=True`` applies the Harvey, Leybourne and Newbold (1997) correction for a
forecast horizon h, DM* = DM sqrt((T + 1 - 2h + h (h - 1) / T) / T), compared with Student's
t with T - 1 degrees of freedom.

References: Diebold, F. X. and Mariano, R. S. (1995). Comparing predictive accuracy. Journal
of Business & Economic Statistics 13, 253-263. Newey, W. K. and West, K. D. (1987).
Econometrica 55, 703-708; (1994) Review of Economic Studies 61, 631-653. Harvey, D.,
Leybourne, S. and Newbold, P. (1997). Testing the equality of prediction mean squared errors.
International Journal of Forecasting 13, 281-291.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from scipy import stats

from smle.errors import SmleInputError, describe

__all__ = ["DieboldMarianoTest", "diebold_mariano", "newey_west_lags", "long_run_variance"]

ALTERNATIVES = ("two-sided", "greater", "less")
MIN_PERIODS = 10


class DieboldMarianoTest(NamedTuple):
    """Diebold-Mariano test of two score sequences.

    Attributes:
      statistic: DM (or the Harvey-Leybourne-Newbold DM* with ``small_sample``).
      p_value: from N(0, 1), or Student's t with T - 1 degrees of freedom with ``small_sample``.
      mean_difference: d_bar = mean(score_a - score_b) (positive: forecast a scores higher).
      long_run_variance: LRV of d_t (Bartlett weights, ``lags`` lags).
      lags: the number of autocovariance lags L used.
      n_periods: T.
      small_sample: whether the correction was applied; horizon: h used by it.
      alternative: "two-sided", "greater" (a scores higher) or "less".
    """

    statistic: float
    p_value: float
    mean_difference: float
    long_run_variance: float
    lags: int
    n_periods: int
    small_sample: bool
    horizon: int
    alternative: str


def newey_west_lags(n_periods: int) -> int:
    """floor(4 (T / 100)^(2/9)): the Newey-West (1994) rule-of-thumb lag count (common practice)."""
    return int(math.floor(4.0 * (n_periods / 100.0) ** (2.0 / 9.0)))


def long_run_variance(series, lags: int) -> float:
    """Bartlett-weighted (Newey-West 1987) long-run variance of a series, autocovariances over T."""
    x = np.asarray(series, dtype=float)
    x = x - x.mean()
    n = x.size
    value = x @ x / n
    for k in range(1, lags + 1):
        value += 2.0 * (1.0 - k / (lags + 1.0)) * (x[k:] @ x[:-k]) / n
    return float(value)


def _check_positive_int(name: str, value, lower: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < lower:
        raise SmleInputError(f"{name} = {describe(value)} is not accepted; accepted: an integer >= {lower}")
    return int(value)


def diebold_mariano(score_a, score_b, *, lags: int | None = None, small_sample: bool = False, horizon: int = 1,
                    alternative: str = "two-sided") -> DieboldMarianoTest:
    """Diebold-Mariano (1995) test that two forecasts have equal expected score.

    Args:
      score_a, score_b: per-period scores of the two forecasts (log predictive densities, higher
        is better), shape (T,) each, T >= 10, finite.
      lags: autocovariance lags L of the long-run variance, 0 <= L < T; None for the
        Newey-West (1994) rule floor(4 (T/100)^(2/9)).
      small_sample: apply the Harvey-Leybourne-Newbold (1997) correction and Student's t(T - 1).
      horizon: forecast horizon h of the correction (>= 1; 1 for one-step scores).
      alternative: "two-sided", "greater" (forecast a has the higher expected score) or "less".

    Returns:
      :class:`DieboldMarianoTest`.

    Raises:
      SmleInputError: for shapes, non-finite values, bad options, or a constant differential
        (zero long-run variance: the statistic is undefined).
    """
    a, b = (np.asarray(s, dtype=float) for s in (score_a, score_b))
    for label, array in (("score_a", a), ("score_b", b)):
        if array.ndim != 1 or array.size < MIN_PERIODS:
            raise SmleInputError(
                f"{label} has shape {array.shape}; accepted: a one-dimensional series of >= {MIN_PERIODS} scores"
            )
        bad = np.flatnonzero(~np.isfinite(array))
        if bad.size:
            raise SmleInputError(
                f"{label} is not finite at {bad.size} position(s) (first: index {int(bad[0])}, value "
                f"{array[bad[0]]!r}); accepted: finite scores"
            )
    if a.size != b.size:
        raise SmleInputError(
            f"score_a has {a.size} periods but score_b has {b.size}; accepted: scores of the same periods"
        )
    if alternative not in ALTERNATIVES:
        raise SmleInputError(
            f"alternative = {alternative!r} is not accepted; accepted: {', '.join(map(repr, ALTERNATIVES))}"
        )
    n = a.size
    lags = newey_west_lags(n) if lags is None else _check_positive_int("lags", lags, 0)
    if lags >= n:
        raise SmleInputError(f"lags = {lags} is not accepted; accepted: an integer from 0 to T - 1 = {n - 1}")
    horizon = _check_positive_int("horizon", horizon, 1)
    difference = a - b
    variance = long_run_variance(difference, lags)
    if not variance > 1e-14 * max(float(np.mean(difference**2)), np.finfo(float).tiny):
        raise SmleInputError(
            "score_a - score_b is constant (zero long-run variance); the Diebold-Mariano statistic is undefined. "
            "Accepted: two score sequences whose difference varies"
        )
    mean = float(difference.mean())
    statistic = mean / math.sqrt(variance / n)
    law = stats.norm
    if small_sample:
        statistic *= math.sqrt((n + 1 - 2 * horizon + horizon * (horizon - 1) / n) / n)
        law = stats.t(n - 1)
    if alternative == "two-sided":
        p_value = 2.0 * law.sf(abs(statistic))
    elif alternative == "greater":
        p_value = law.sf(statistic)
    else:
        p_value = law.cdf(statistic)
    return DieboldMarianoTest(statistic, float(p_value), mean, variance, lags, n, bool(small_sample), horizon,
                              alternative)
