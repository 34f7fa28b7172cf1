"""Shared helpers of the model tests (tests/test_model_*.py).

Shapes are reused across files so that each compiled kernel is built once: T in {500, 2000},
n_draws 64.
"""

import numpy as np
from scipy import stats

import smle
from smle.reference import grid_loglik

N_SEEDS = 20
N_DRAWS = 64


def eis_across_seeds(model, params, y, n_seeds=N_SEEDS, first_seed=0):
    """EIS estimates over independent seeds: (values, results)."""
    results = [smle.loglik(model, params, y, n_draws=N_DRAWS, seed=first_seed + s, method="eis") for s in range(n_seeds)]
    return np.array([r.value for r in results]), results


def assert_eis_matches(values, exact):
    """Every estimate within 4 measured NSE (the spread across seeds) of the exact value, and the
    bias-corrected mean (+NSE^2/2, Durbin and Koopman 1997) within 4 standard errors of the mean."""
    nse = values.std(ddof=1)
    assert np.all(np.abs(values - exact) < 4 * nse), (values - exact, nse)
    assert abs(values.mean() + 0.5 * nse**2 - exact) < 4 * nse / np.sqrt(values.size), (values.mean() - exact, nse)
    return nse


def assert_eis_matches_grid(model, params, y, n_grid=1000):
    exact = grid_loglik(model, params, y, n_grid=n_grid)
    values, results = eis_across_seeds(model, params, y)
    assert all(r.converged for r in results)
    return assert_eis_matches(values, exact), exact


def coverage_misses(fits, truth):
    """Number of 95% intervals (over fits and parameters) that miss the true value, and the total."""
    misses = total = 0
    for f in fits:
        for name, value in truth.items():
            lower, upper = f.conf_int[name]
            misses += not (lower <= value <= upper)
            total += 1
    return misses, total


def binomial_bound(total, level=0.95, tail=0.001):
    """Largest miss count that is not rejected at ``tail`` when each interval misses with 1 - level.

    Intervals of one fit are correlated, so this is a lenient check of calibration, not a test
    of exact coverage.
    """
    return int(stats.binom.ppf(1 - tail, total, 1 - level))
