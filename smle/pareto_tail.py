"""The tail of importance weights: a maximum-likelihood fit of the generalised Pareto
distribution (GPD) to exceedances (own code) and the Pareto k-hat built on it.

The fit maximises the profile likelihood in ``theta = xi / beta`` (Grimshaw 1993,
Technometrics 35, 185-191); standard errors come from the observed information. It sits in the
foundation layer because both the likelihood (every EIS result with at least 100 scoring
weights reports its k-hat) and :mod:`smle.diagnostics.weight_tail` (the health check's tail
tests) use it. Pure NumPy/SciPy.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from scipy import optimize

from smle.errors import SmleInputError, describe

MIN_EXCEEDANCES = 20
"""Fewest exceedances a tail fit accepts; fewer leave xi essentially undetermined."""

_SMALL_XI = 1e-7  # below this |xi| the exponential-limit formulas are used (no 0/0)


class GeneralizedParetoFit(NamedTuple):
    """A maximum-likelihood fit of the GPD to exceedances y > 0.

    Attributes:
      xi: shape estimate (xi > 0 power tail with index 1/xi, xi = 0 exponential,
        xi < 0 bounded support).
      beta: scale estimate, in the units of the exceedances.
      se_xi, se_beta: standard errors from the inverse observed information at the
        estimate (nan if the information is not positive definite, which happens for
        xi <= -1/2 where the fit is not regular).
      loglik: maximised log-likelihood (natural log, summed over exceedances).
      n_exceedances: number of exceedances fitted.
    """

    xi: float
    beta: float
    se_xi: float
    se_beta: float
    loglik: float
    n_exceedances: int


# ---------------------------------------------------------------------------------------
# The GPD likelihood


def _log1p_ratio(xi: float, a: np.ndarray) -> np.ndarray:
    """log(1 + xi a) / xi, equal to a in the limit xi -> 0."""
    if abs(xi) < _SMALL_XI:
        return a - 0.5 * xi * a * a
    return np.log1p(xi * a) / xi


def gpd_loglik(xi: float, beta: float, exceedances: np.ndarray) -> float:
    """GPD log-likelihood sum_i log f(y_i; xi, beta); -inf outside the support."""
    y = np.asarray(exceedances, dtype=float)
    if beta <= 0.0:
        return -math.inf
    a = y / beta
    if np.any(1.0 + xi * a <= 0.0):
        return -math.inf
    return float(-y.size * math.log(beta) - np.sum((1.0 + xi) * _log1p_ratio(xi, a)))


def _observed_information(xi: float, beta: float, y: np.ndarray) -> np.ndarray:
    """Minus the Hessian of the GPD log-likelihood in (xi, beta), analytic."""
    a = y / beta
    d = 1.0 + xi * a
    if abs(xi) < _SMALL_XI:
        l_xixi = a * a - 2.0 * a**3 / 3.0  # limit of the expression below as xi -> 0
    else:
        l_xixi = (-2.0 * np.log1p(xi * a) / xi**3 + 2.0 * a / (xi * xi * d)
                  + (1.0 / xi + 1.0) * a * a / (d * d))
    l_xibeta = a * (1.0 - a) / (beta * d * d)
    l_betabeta = 1.0 / beta**2 + (1.0 + xi) * (a / beta**2) * (-2.0 / d + xi * a / (d * d))
    return -np.array([[l_xixi.sum(), l_xibeta.sum()], [l_xibeta.sum(), l_betabeta.sum()]])


def _vector(value, argument: str, what: str) -> np.ndarray:
    """``value`` as a 1-d float array, or an error naming ``argument`` and saying it must be ``what``."""
    try:
        array = np.asarray(value, dtype=float)
    except (TypeError, ValueError) as error:
        raise SmleInputError(f"{argument}={describe(value)} is not numeric; pass a 1-d array of {what}") from error
    if array.ndim != 1:
        raise SmleInputError(f"{argument} has shape {array.shape}; pass a 1-d array of {what}")
    return array


def _check_exceedances(exceedances) -> np.ndarray:
    y = _vector(exceedances, "exceedances", "positive exceedances")
    if y.size < MIN_EXCEEDANCES:
        raise SmleInputError(
            f"exceedances has {y.size} values; a generalised Pareto fit needs at least "
            f"{MIN_EXCEEDANCES}")
    if not np.all(np.isfinite(y)):
        bad = y[~np.isfinite(y)][0]
        raise SmleInputError(
            f"exceedances contains the non-finite value {bad!r}; all must be finite and >= 0")
    if np.any(y < 0.0):
        raise SmleInputError(
            f"exceedances contains the negative value {float(y[y < 0][0])!r}; exceedances "
            "over a threshold are >= 0")
    if np.max(y) <= 0.0 or np.ptp(y) == 0.0:
        raise SmleInputError(
            f"exceedances are all equal ({float(y[0])!r}); a tail fit needs spread in the "
            "values")
    return y


def fit_generalized_pareto(exceedances) -> GeneralizedParetoFit:
    """Maximum-likelihood fit of the generalised Pareto distribution (location 0).

    Density f(y) = (1 / beta) (1 + xi y / beta)^(-1 / xi - 1) for y >= 0 and
    1 + xi y / beta > 0. The likelihood is profiled in theta = xi / beta (Grimshaw 1993):
    for fixed theta, xi(theta) = mean log(1 + theta y) and beta = xi / theta, leaving a
    one-dimensional maximisation over theta > -1 / max(y). It is located on a wide grid of
    theta * max(y) and refined with a bounded scalar search. Reliable for xi in about
    (-0.5, 3) and beyond on the positive side. For xi < -1 the likelihood is unbounded at
    the edge beta / xi -> -max(y) and no maximum-likelihood estimate exists; the value
    returned is then a local maximum or the edge of the search (theta max(y) = -1 + 1e-8),
    to be read only as 'bounded tail', and the standard errors are nan.

    Args:
      exceedances: 1-d array of values y_i >= 0 (amounts over a threshold), at least
        ``MIN_EXCEEDANCES`` of them, not all equal.

    Returns:
      A :class:`GeneralizedParetoFit` with estimates, observed-information standard errors
      and the maximised log-likelihood.
    """
    y = _check_exceedances(exceedances)
    n = y.size
    y_max = float(np.max(y))
    y_mean = float(np.mean(y))

    def xi_of(t: float) -> float:  # t = theta * y_max
        if abs(t) < 1e-12:
            return 0.0
        return float(np.mean(np.log1p(t * (y / y_max))))

    def neg_profile(t: float) -> float:
        if t <= -1.0:
            return math.inf
        if abs(t) < 1e-10:  # exponential limit: beta = mean(y)
            return n * math.log(y_mean) + n
        xi = xi_of(t)
        beta = xi / (t / y_max)
        if not beta > 0.0:
            return math.inf
        return n * math.log(beta) + n * (1.0 + xi)

    # t in (-1, inf): negative side approaches -1 geometrically, positive side log-spaced.
    grid = np.concatenate([-1.0 + np.logspace(-8, -0.3, 60), -np.logspace(-6, -0.3, 40),
                           [0.0], np.logspace(-6, 10, 200)])
    grid = np.unique(grid)
    values = np.array([neg_profile(t) for t in grid])
    best = int(np.argmin(values))
    lower = grid[max(best - 1, 0)]
    upper = grid[min(best + 1, grid.size - 1)]
    if best == 0:
        lower = -1.0 + 1e-12
    result = optimize.minimize_scalar(neg_profile, bounds=(lower, upper), method="bounded",
                                      options={"xatol": 1e-12 * max(1.0, abs(upper)),
                                               "maxiter": 500})
    t_hat = float(result.x) if result.fun <= values[best] else float(grid[best])
    if abs(t_hat) < 1e-10:
        xi_hat, beta_hat = 0.0, y_mean
    else:
        xi_hat = xi_of(t_hat)
        beta_hat = xi_hat / (t_hat / y_max)
    loglik = gpd_loglik(xi_hat, beta_hat, y)

    info = _observed_information(xi_hat, beta_hat, y)
    se_xi = se_beta = math.nan
    if np.all(np.isfinite(info)):
        try:
            np.linalg.cholesky(info)
            cov = np.linalg.inv(info)
            se_xi, se_beta = float(math.sqrt(cov[0, 0])), float(math.sqrt(cov[1, 1]))
        except np.linalg.LinAlgError:
            pass
    return GeneralizedParetoFit(float(xi_hat), float(beta_hat), se_xi, se_beta, loglik, n)


def _fit_restricted(y: np.ndarray, xi: float) -> tuple[float, float]:
    """Scale and log-likelihood of the GPD with the shape fixed at xi > 0."""
    # Score in beta: n = (1 + xi) sum y / (beta + xi y); the left side minus the right is
    # increasing in beta, from n - n (1 + xi) / xi < 0 at beta -> 0 to n > 0 at infinity.
    def score(log_beta: float) -> float:
        beta = math.exp(log_beta)
        return 1.0 - (1.0 + xi) * float(np.mean(y / (beta + xi * y)))

    centre = math.log(float(np.mean(y)))
    low, high = centre - 50.0, centre + 50.0
    log_beta = optimize.brentq(score, low, high, xtol=1e-14, rtol=1e-14, maxiter=500)
    beta = math.exp(log_beta)
    return beta, gpd_loglik(xi, beta, y)


K_HAT_LIMIT = 0.7
"""k-hat at and above which an importance-sampling estimate is unusable (Vehtari et al. 2024)."""


class ParetoKHat(NamedTuple):
    """The PSIS diagnostic of the weights.

    Attributes:
      k_hat: GPD shape fitted to the M largest weights.
      good_below: min(1 - 1 / log10(S), 0.7); k_hat below it is reliable for S draws.
      n_tail: M = ceil(min(S / 5, 3 sqrt(S))).
      n_weights: S.
      fit: the GPD fit behind ``k_hat``.
    """

    k_hat: float
    good_below: float
    n_tail: int
    n_weights: int
    fit: GeneralizedParetoFit


def _check_log_weights(log_weights, argument: str = "log_weights") -> np.ndarray:
    lw = _vector(log_weights, argument, "log importance weights (e.g. LoglikResult.log_weights)")
    if not np.all(np.isfinite(lw)):
        where = int(np.flatnonzero(~np.isfinite(lw))[0])
        raise SmleInputError(
            f"{argument}[{where}] = {float(lw[where])!r} is not finite; log weights must all be "
            "finite (a weight of 0 or infinity points to a failed EIS run)")
    if lw.size and np.ptp(lw) == 0.0:
        raise SmleInputError(
            f"{argument} are all equal ({float(lw[0])!r}); degenerate weights have no tail "
            "to fit (the importance density is exact, so no diagnostic is needed)")
    return lw


def _exceedances(relative_weights_sorted: np.ndarray, n_tail: int) -> tuple[np.ndarray, float]:
    """The n_tail largest weights minus the next largest (the threshold)."""
    threshold = float(relative_weights_sorted[-n_tail - 1])
    return relative_weights_sorted[-n_tail:] - threshold, threshold


def k_hat_tail_size(n_weights: int) -> int:
    """M = ceil(min(S / 5, 3 sqrt(S))): the tail k-hat is fitted to; k-hat needs M >= ``MIN_EXCEEDANCES``."""
    return int(math.ceil(min(0.2 * n_weights, 3.0 * math.sqrt(n_weights))))


def pareto_k_hat(log_weights) -> ParetoKHat:
    """The Pareto-smoothed importance sampling diagnostic k-hat.

    The M = ceil(min(S / 5, 3 sqrt(S))) largest weights minus the (M+1)-th largest are
    fitted by a GPD; k-hat is its shape. Vehtari et al. (2024) estimate it with the
    Zhang-Stephens posterior-mean estimator and a weak prior; here it is the plain
    maximum-likelihood fit of :func:`fit_generalized_pareto`, which is somewhat more
    variable in small tails. Their rule: k-hat below min(1 - 1 / log10(S), 0.7) is good,
    above 0.7 the estimate is unreliable whatever S.

    Args:
      log_weights: 1-d array of S log importance weights, finite, not all equal; S must
        give M >= ``MIN_EXCEEDANCES`` (S >= 100).

    Returns:
      A :class:`ParetoKHat`.

    References:
      Vehtari, Simpson, Gelman, Yao and Gabry (2024), JMLR 25(72), 1-58.
    """
    lw = _check_log_weights(log_weights)
    n_weights = lw.size
    n_tail = k_hat_tail_size(n_weights)
    if n_tail < MIN_EXCEEDANCES:
        raise SmleInputError(
            f"log_weights has {n_weights} weights, leaving a tail of {n_tail}; k-hat needs "
            f"a tail of at least {MIN_EXCEEDANCES}, that is at least 100 weights")
    relative = np.sort(np.exp(lw - np.max(lw)))
    y, _ = _exceedances(relative, n_tail)
    fit = fit_generalized_pareto(y)
    good_below = min(1.0 - 1.0 / math.log10(n_weights), 0.7)
    return ParetoKHat(fit.xi, good_below, n_tail, n_weights, fit)
