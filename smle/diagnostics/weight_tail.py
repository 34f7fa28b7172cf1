"""The tail of the importance weights: does their variance exist?

An importance-sampling estimate of a likelihood is only root-S consistent with a usable
numerical standard error if the weights have a finite variance. The largest weights are
fitted by a generalised Pareto distribution (GPD) with shape ``xi`` and scale ``beta``; a
finite variance means ``xi < 1/2``.

* :func:`fit_generalized_pareto` -- maximum-likelihood GPD fit to exceedances (own code, in
  :mod:`smle.pareto_tail`).
* :func:`tail_test` -- the Wald and likelihood-ratio tests of Koopman, Shephard and Creal
  (2009) of H0: ``xi <= 1/2`` at several thresholds.
* :func:`pareto_k_hat` -- the Pareto-smoothed importance sampling k-hat of Vehtari et al.
  (2024) and its sample-size dependent threshold.
* :func:`tail_verdict` -- 'healthy' / 'doubtful' / 'unreliable' with the reason in words.

Pure NumPy/SciPy; it takes ``LoglikResult.log_weights`` (or any 1-d array of log weights).

References:
  Koopman, S. J., Shephard, N. and Creal, D. (2009). Testing the assumptions behind
  importance sampling. Journal of Econometrics 149, 2-11.
  Vehtari, A., Simpson, D., Gelman, A., Yao, Y. and Gabry, J. (2024). Pareto smoothed
  importance sampling. Journal of Machine Learning Research 25(72), 1-58.
  Grimshaw, S. D. (1993). Computing maximum likelihood estimates for the generalized
  Pareto distribution. Technometrics 35, 185-191 (the profile in theta = xi / beta).
"""

from __future__ import annotations

import math
from typing import NamedTuple, Sequence

import numpy as np
from scipy import stats

from smle.pareto_tail import (  # noqa: F401 (the GPD fit and k-hat are part of this module's interface)
    K_HAT_LIMIT, MIN_EXCEEDANCES, GeneralizedParetoFit, ParetoKHat, _check_log_weights, _exceedances, _fit_restricted,
    _observed_information, _vector, fit_generalized_pareto, gpd_loglik, pareto_k_hat,
)
from smle.errors import SmleInputError, describe

DEFAULT_THRESHOLDS = (0.01, 0.05, 0.10, 0.20)
"""Fractions of the largest weights used as exceedances by :func:`tail_test`."""

FINITE_VARIANCE_XI = 0.5
"""GPD shape at the edge of a finite variance of the weights."""

class ThresholdTest(NamedTuple):
    """The Koopman-Shephard-Creal tests of H0: xi <= 1/2 at one threshold.

    Attributes:
      fraction: fraction of the weights that are exceedances.
      threshold: the threshold weight, relative to the largest weight (in (0, 1)).
      fit: the unrestricted GPD fit to the exceedances (weights relative to the largest).
      wald: (xi_hat - 1/2) / se_xi.
      wald_p_value: one-sided, 1 - Phi(wald).
      lr: 2 (loglik_hat - loglik at xi = 1/2), set to 0 when xi_hat <= 1/2.
      lr_p_value: one-sided. On the boundary of H0 the null law of ``lr`` is the 50:50
        mixture of a point mass at 0 and chi2(1), so p = chi2_1.sf(lr) / 2 when lr > 0
        and p = 1 when lr = 0.
      beta_restricted: scale of the fit restricted to xi = 1/2.
    """

    fraction: float
    threshold: float
    fit: GeneralizedParetoFit
    wald: float
    wald_p_value: float
    lr: float
    lr_p_value: float
    beta_restricted: float


class TailVerdict(NamedTuple):
    """The overall judgement of the weights' tail.

    Attributes:
      verdict: 'healthy', 'doubtful' or 'unreliable'.
      reason: the judgement in words.
      k_hat: the PSIS diagnostic.
      tests: the Koopman-Shephard-Creal tests at the thresholds with enough exceedances.
      level: significance level used for the tests.
    """

    verdict: str
    reason: str
    k_hat: ParetoKHat
    tests: tuple
    level: float


# ---------------------------------------------------------------------------------------
# Weights


def _check_thresholds(thresholds, n_weights: int) -> list[tuple[float, int]]:
    try:
        fractions = [float(f) for f in thresholds]
    except (TypeError, ValueError) as error:
        raise SmleInputError(
            f"thresholds={describe(thresholds)} is not a sequence of numbers; pass fractions "
            "in (0, 1), e.g. (0.01, 0.05, 0.1)") from error
    if not fractions:
        raise SmleInputError("thresholds=() is empty; pass at least one fraction in (0, 1)")
    out = []
    for f in fractions:
        if not 0.0 < f < 1.0:
            raise SmleInputError(
                f"thresholds contains {f!r}; each is the fraction of largest weights used as "
                "exceedances and must lie in (0, 1)")
        n_tail = int(math.ceil(f * n_weights))
        if n_tail < MIN_EXCEEDANCES or n_tail >= n_weights:
            need = int(math.ceil(MIN_EXCEEDANCES / f))
            raise SmleInputError(
                f"thresholds contains {f!r}, which leaves {n_tail} exceedances of "
                f"{n_weights} weights; a tail fit needs at least {MIN_EXCEEDANCES}, so this "
                f"fraction needs at least {need} weights (or use a larger fraction)")
        out.append((f, n_tail))
    return out


def tail_test(log_weights, thresholds: Sequence[float] = DEFAULT_THRESHOLDS) -> tuple:
    """Tests of a finite variance of the importance weights, at several thresholds.

    For each fraction f the ceil(f S) largest weights, relative to the largest (for
    numerical safety; xi is scale-free), minus the next largest weight are fitted by a GPD,
    and H0: xi <= 1/2 (finite variance) is tested against xi > 1/2 by the Wald statistic
    (xi_hat - 1/2) / se and by the likelihood ratio against the fit with xi = 1/2, both
    one-sided (Koopman, Shephard and Creal 2009). Large statistics, small p-values, are
    evidence of an infinite variance.

    Args:
      log_weights: 1-d array of S log importance weights, finite, not all equal.
      thresholds: fractions in (0, 1) of the weights used as exceedances; each must leave
        at least ``MIN_EXCEEDANCES`` exceedances.

    Returns:
      A tuple of :class:`ThresholdTest`, one per fraction, in the given order.

    References:
      Koopman, Shephard and Creal (2009), J. Econometrics 149, 2-11.
    """
    lw = _check_log_weights(log_weights)
    plan = _check_thresholds(thresholds, lw.size)
    relative = np.sort(np.exp(lw - np.max(lw)))
    tests = []
    for fraction, n_tail in plan:
        y, threshold = _exceedances(relative, n_tail)
        fit = fit_generalized_pareto(y)
        wald = (fit.xi - FINITE_VARIANCE_XI) / fit.se_xi if fit.se_xi > 0 else math.nan
        wald_p = float(stats.norm.sf(wald)) if math.isfinite(wald) else math.nan
        beta_0, loglik_0 = _fit_restricted(y, FINITE_VARIANCE_XI)
        lr = max(2.0 * (fit.loglik - loglik_0), 0.0) if fit.xi > FINITE_VARIANCE_XI else 0.0
        lr_p = 0.5 * float(stats.chi2.sf(lr, 1)) if lr > 0.0 else 1.0
        tests.append(ThresholdTest(fraction, threshold, fit, float(wald), wald_p, float(lr),
                                   lr_p, beta_0))
    return tuple(tests)


def k_hat_limits(k: ParetoKHat) -> str:
    """The k-hat limits the reading uses, in words (printed beside k-hat in reports)."""
    return (f"finite variance up to {FINITE_VARIANCE_XI:g}; sample-size limit {k.good_below:.3f} for "
            f"{k.n_weights} weights (Vehtari et al. 2024); {K_HAT_LIMIT:g} and above unusable")


def k_hat_reading(k: ParetoKHat) -> tuple[str | None, str]:
    """What k-hat says: ``(severity, sentence)``, severity None, 'doubtful' or 'unreliable'.

    One rule for the verdict and the text (so the two cannot disagree):
      * k-hat <= 1/2 (and within the sample-size limit): the weights' variance is finite, the
        NSE is valid -- no severity;
      * 1/2 < k-hat < the sample-size limit min(1 - 1 / log10 S, 0.7): the variance is probably
        infinite, so the NSE is not to be trusted, although the estimate itself still converges
        (Vehtari et al. 2024, for Pareto-smoothed estimates) -- 'doubtful';
      * the limit <= k-hat < 0.7: too few draws for a tail this heavy -- 'doubtful';
      * k-hat >= 0.7: 'unreliable' whatever S.
    (Since S >= 100, the sample-size limit is at least 1/2.)
    """
    where = f"k-hat {k.k_hat:.3f} (largest {k.n_tail} of {k.n_weights} weights)"
    if k.k_hat >= K_HAT_LIMIT:
        return "unreliable", (f"{where} is at least {K_HAT_LIMIT:g}: the weights' variance is infinite and even "
                              "the mean converges too slowly for the estimate to be trusted")
    if k.k_hat >= k.good_below:
        return "doubtful", (f"{where} is at or above {k.good_below:.3f}, the sample-size limit for "
                            f"{k.n_weights} weights: use more draws")
    if k.k_hat > FINITE_VARIANCE_XI:
        return "doubtful", (f"{where} is above {FINITE_VARIANCE_XI:g}: the weights' variance is probably "
                            f"infinite, so the NSE is not to be trusted (it is below the sample-size limit "
                            f"{k.good_below:.3f}, so the estimate itself still converges)")
    return None, f"{where} is at most {FINITE_VARIANCE_XI:g}: the weights' variance looks finite"


def tail_verdict(log_weights, level: float = 0.05) -> TailVerdict:
    """Judge the weights' tail: 'healthy', 'doubtful' or 'unreliable', with the reason.

    Rules, first match wins:
      * 'unreliable' if k-hat >= 0.7, or the Wald test rejects a finite variance at
        ``level`` at every threshold tried;
      * 'doubtful' if k-hat > 0.5 (infinite variance likely) or k-hat is at or above the
        sample-size limit min(1 - 1 / log10(S), 0.7) (see :func:`k_hat_reading`, which gives
        the verdict and the words), or some test rejects;
      * 'healthy' otherwise.
    The tests use those of ``DEFAULT_THRESHOLDS`` that leave enough exceedances.

    Args:
      log_weights: 1-d array of at least 100 log importance weights.
      level: significance level of the tests, in (0, 1).

    Returns:
      A :class:`TailVerdict`.
    """
    if not 0.0 < level < 1.0:
        raise SmleInputError(f"level={describe(level)}; pass a significance level in (0, 1)")
    k = pareto_k_hat(log_weights)
    lw = np.asarray(log_weights, dtype=float)
    usable = [f for f in DEFAULT_THRESHOLDS
              if MIN_EXCEEDANCES <= math.ceil(f * lw.size) < lw.size]
    tests = tail_test(lw, usable) if usable else ()
    rejected = [t for t in tests if math.isfinite(t.wald_p_value) and t.wald_p_value < level]
    reject_text = ", ".join(f"{t.fraction:g} (xi = {t.fit.xi:.2f}, p = {t.wald_p_value:.3g})"
                            for t in rejected)
    k_verdict, k_text = k_hat_reading(k)
    if k_verdict == "unreliable":
        verdict, reason = k_verdict, k_text
    elif tests and len(rejected) == len(tests):
        verdict = "unreliable"
        reason = (f"a finite variance is rejected at level {level:g} at every threshold "
                  f"(fractions {reject_text}); {k_text}")
    elif k_verdict == "doubtful":
        verdict, reason = k_verdict, k_text
    elif rejected:
        verdict = "doubtful"
        reason = (f"{k_text}; but a finite variance is rejected at level {level:g} at fractions {reject_text}")
    else:
        tried = ", ".join(f"{t.fraction:g}" for t in tests) or "none (too few weights)"
        verdict = "healthy"
        reason = f"{k_text}; no test rejects a finite variance at level {level:g} (fractions tried: {tried})"
    return TailVerdict(verdict, reason, k, tests, level)
