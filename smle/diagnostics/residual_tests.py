"""The residual statistics of goodness of fit: normal scores, Ljung-Box, ARCH LM, Durbin-Watson,
the Berkowitz test and the two-sided tail test (NumPy and SciPy; each equals its textbook
formula; the references are in :mod:`smle.diagnostics.gof`).
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np
from scipy import optimize, stats
from scipy.special import ndtri

from smle.errors import SmleInputError, describe

PIT_CLIP = 1e-15


# ---------------------------------------------------------------------------------------------
# Transforms and statistics (NumPy and SciPy; each equals its textbook formula)


def normal_scores(pit) -> np.ndarray:
    """``Phi^{-1}(PIT)``, with the PITs clipped to [1e-15, 1 - 1e-15] so that scores are finite."""
    pit = np.asarray(pit, dtype=float)
    return ndtri(np.clip(pit, PIT_CLIP, 1.0 - PIT_CLIP))


def _series(x, name: str, min_length: int) -> np.ndarray:
    array = np.asarray(x, dtype=float)
    if array.ndim != 1 or array.shape[0] < min_length or not np.all(np.isfinite(array)):
        raise SmleInputError(
            f"{name} has shape {array.shape}{'' if np.all(np.isfinite(array)) else ' with non-finite values'}; "
            f"accepted: a one-dimensional finite series of at least {min_length} values"
        )
    return array


def check_lags(lags, n: int) -> np.ndarray:
    values = np.atleast_1d(np.asarray(lags))
    if values.size == 0 or not np.issubdtype(values.dtype, np.integer) or np.any(values < 1) or np.any(values >= n):
        raise SmleInputError(f"lags = {describe(lags)} is not accepted; accepted: positive integers below {n}")
    return values.astype(int)


def autocorrelations(x, max_lag: int) -> np.ndarray:
    """Sample autocorrelations r_1..r_max_lag (demeaned, divided by the lag-0 sum over all T)."""
    x = np.asarray(x, float) - np.mean(x)
    denominator = x @ x
    return np.array([x[k:] @ x[:-k] / denominator for k in range(1, max_lag + 1)])


def ljung_box(x, lags: Sequence[int] = (5, 10, 20)) -> tuple[np.ndarray, np.ndarray]:
    """Ljung-Box Q = T (T + 2) sum_{k<=h} r_k^2 / (T - k) and its chi-squared(h) p-value per lag h.

    References: Ljung and Box (1978), Biometrika 65, 297-303.
    """
    x = _series(x, "x", 3)
    lags = check_lags(lags, x.shape[0])
    n = x.shape[0]
    r = autocorrelations(x, int(lags.max()))
    terms = r**2 / (n - np.arange(1, lags.max() + 1))
    q = n * (n + 2) * np.cumsum(terms)[lags - 1]
    return q, stats.chi2.sf(q, lags)


def arch_lm(x, lags: int = 5) -> tuple[float, float]:
    """Engle's ARCH LM statistic ``(T - q) R^2`` of x_t^2 on a constant and q lags, and its p-value.

    References: Engle (1982), Econometrica 50, 987-1007.
    """
    x = _series(x, "x", 3)
    q = int(check_lags(lags, x.shape[0] - 1)[0])
    squares = x**2
    target = squares[q:]
    design = np.column_stack([np.ones(target.shape[0])] + [squares[q - k:-k] for k in range(1, q + 1)])
    coefficients, *_ = np.linalg.lstsq(design, target, rcond=None)
    residual = target - design @ coefficients
    centred = target - target.mean()
    r_squared = 1.0 - (residual @ residual) / (centred @ centred)
    statistic = target.shape[0] * r_squared
    return float(statistic), float(stats.chi2.sf(statistic, q))


def durbin_watson(x) -> float:
    """Durbin-Watson statistic ``sum (x_t - x_{t-1})^2 / sum x_t^2`` (Durbin and Watson 1950)."""
    x = _series(x, "x", 2)
    difference = np.diff(x)
    return float(difference @ difference / (x @ x))


def _ar1_exact_loglik(z, mean, variance, rho):
    """Exact Gaussian AR(1) log-likelihood with a stationary first observation."""
    innovation_var = variance * (1.0 - rho**2)
    first = -0.5 * (math.log(2 * math.pi * variance) + (z[0] - mean) ** 2 / variance)
    e = (z[1:] - mean) - rho * (z[:-1] - mean)
    rest = -0.5 * (e.shape[0] * math.log(2 * math.pi * innovation_var) + (e @ e) / innovation_var)
    return first + rest


def berkowitz_test(scores) -> dict:
    """Berkowitz's LR test of i.i.d. N(0, 1) scores against a Gaussian AR(1) with free moments.

    ``LR = -2 (L(0, 1, 0) - L(mu_hat, var_hat, rho_hat))`` with L the exact AR(1) log-likelihood
    (stationary first observation), maximised numerically from the least-squares start;
    chi-squared(3) under the null.

    Returns:
      dict with statistic, p_value, mean, variance (of the stationary law) and rho.

    References: Berkowitz (2001), J. Business & Economic Statistics 19, 465-474.
    """
    z = _series(scores, "scores", 10)
    y, lagged = z[1:], z[:-1]
    rho0 = float(np.clip(np.corrcoef(y, lagged)[0, 1], -0.95, 0.95))
    start = np.array([z.mean(), math.log(z.var()), math.atanh(rho0)])

    def negative(theta):
        return -_ar1_exact_loglik(z, theta[0], math.exp(theta[1]), math.tanh(theta[2]))

    best = optimize.minimize(negative, start, method="BFGS", options={"gtol": 1e-9})
    best = optimize.minimize(negative, best.x, method="Nelder-Mead",
                             options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 4000})
    null = _ar1_exact_loglik(z, 0.0, 1.0, 0.0)
    statistic = max(0.0, 2.0 * (-best.fun - null))
    return dict(statistic=statistic, p_value=float(stats.chi2.sf(statistic, 3)), mean=float(best.x[0]),
                variance=float(math.exp(best.x[1])), rho=float(math.tanh(best.x[2])))


def tail_test(scores, tail_probability: float = 0.01) -> dict:
    """Two-tailed censored LR test of the scores' tails against N(0, 1), chi-squared(2).

    Scores inside ``(Phi^{-1}(p), Phi^{-1}(1 - p))`` are censored; the likelihood of N(mu, s^2)
    is the normal density of the tail scores times the probability of the middle for each
    censored one; the LR compares its maximum with (0, 1). Our two-sided variant of the censored
    test of Berkowitz (2001, section 3), which censors one side.
    """
    z = _series(scores, "scores", 10)
    if not (isinstance(tail_probability, float) and 0.0 < tail_probability < 0.5):
        raise SmleInputError(f"tail_probability = {tail_probability!r} is not accepted; accepted: a number in (0, 0.5)")
    low, high = ndtri(tail_probability), ndtri(1.0 - tail_probability)
    tails = z[(z <= low) | (z >= high)]
    n_middle = z.shape[0] - tails.shape[0]

    def loglik(mean, sd):
        middle = stats.norm.cdf((high - mean) / sd) - stats.norm.cdf((low - mean) / sd)
        return np.sum(stats.norm.logpdf(tails, mean, sd)) + n_middle * math.log(max(middle, 1e-300))

    best = optimize.minimize(lambda th: -loglik(th[0], math.exp(th[1])), np.array([0.0, 0.0]),
                             method="Nelder-Mead", options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 4000})
    statistic = max(0.0, 2.0 * (-best.fun - loglik(0.0, 1.0)))
    return dict(statistic=statistic, p_value=float(stats.chi2.sf(statistic, 2)), n_tail=int(tails.shape[0]),
                expected_tail=2.0 * tail_probability * z.shape[0], mean=float(best.x[0]),
                sd=float(math.exp(best.x[1])))
