"""Coverage tests of a value-at-risk hit sequence: Kupiec (1995), Christoffersen (1998).

A hit sequence is I_t = 1 when the period's loss exceeded the forecast value at risk, else 0.
Under a correct forecast at level p the hits are i.i.d. Bernoulli(p). The tests are likelihood
ratio tests:

* unconditional coverage (Kupiec 1995): H0 P(I_t = 1) = p against an i.i.d. Bernoulli(pi),
  ``LR_uc = -2 [log L(p) - log L(pi_hat)]``, pi_hat = hits / T, asymptotically chi2(1);
* independence (Christoffersen 1998): H0 i.i.d. Bernoulli(pi) against a first-order Markov
  chain with P(I_t = 1 | I_{t-1} = 0) = pi01 and P(I_t = 1 | I_{t-1} = 1) = pi11, estimated by
  transition counts n_ij over t = 2..T, ``LR_ind = -2 [log L(pi_hat) - log L(pi01_hat, pi11_hat)]``,
  chi2(1);
* conditional coverage (Christoffersen 1998): H0 i.i.d. Bernoulli(p) against the Markov chain,
  ``LR_cc = -2 [log L(p) - log L(pi01_hat, pi11_hat)]``, chi2(2). With all likelihoods on the
  T - 1 transitions (conditioning on I_1), LR_cc = LR_uc(transitions) + LR_ind exactly; the
  result reports both pieces.

Edge cases follow the convention 0 log 0 = 0 (the limit of the likelihood): with no hits or no
transitions out of a hit, the corresponding terms vanish, the estimate of an unidentified
probability (pi11 with no hit before T) is reported as NaN, and the statistics stay finite
(LR_ind = 0 when the sequence has no hits or only hits). Statistics are clipped at 0 against
rounding.

References: Kupiec, P. H. (1995). Techniques for verifying the accuracy of risk measurement
models. Journal of Derivatives 3, 73-84. Christoffersen, P. F. (1998). Evaluating interval
forecasts. International Economic Review 39, 841-862.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy.special import xlogy
from scipy.stats import chi2

from smle.errors import SmleInputError, describe

__all__ = [
    "CoverageTest",
    "IndependenceTest",
    "ConditionalCoverageTest",
    "kupiec_unconditional_coverage",
    "christoffersen_independence",
    "christoffersen_conditional_coverage",
]


class CoverageTest(NamedTuple):
    """Kupiec's unconditional coverage test.

    Attributes:
      statistic: LR_uc (chi2(1) under H0).
      p_value: its asymptotic p-value.
      n_hits: number of hits; n_periods: T.
      hit_rate: n_hits / T; expected_rate: p under H0.
    """

    statistic: float
    p_value: float
    n_hits: int
    n_periods: int
    hit_rate: float
    expected_rate: float


class IndependenceTest(NamedTuple):
    """Christoffersen's independence test.

    Attributes:
      statistic: LR_ind (chi2(1) under H0); p_value: its asymptotic p-value.
      n00, n01, n10, n11: transition counts, n_ij = #{t >= 2: I_{t-1} = i, I_t = j}.
      pi01, pi11: estimated P(hit | no hit before), P(hit | hit before) (NaN if no transition
        from that state).
      pi: the hit rate over t = 2..T.
    """

    statistic: float
    p_value: float
    n00: int
    n01: int
    n10: int
    n11: int
    pi01: float
    pi11: float
    pi: float


class ConditionalCoverageTest(NamedTuple):
    """Christoffersen's conditional coverage test.

    Attributes:
      statistic: LR_cc (chi2(2) under H0); p_value: its asymptotic p-value.
      unconditional: the unconditional coverage part LR_uc on the T - 1 transitions.
      independence: the independence part LR_ind (statistic = unconditional + independence).
      expected_rate: p under H0.
    """

    statistic: float
    p_value: float
    unconditional: float
    independence: float
    expected_rate: float


def _check_hits(hits, min_length: int) -> np.ndarray:
    array = np.asarray(hits)
    if array.ndim != 1 or array.shape[0] < min_length:
        raise SmleInputError(
            f"hits has shape {array.shape}; accepted: a one-dimensional sequence of 0/1 (or booleans) "
            f"of length >= {min_length}"
        )
    try:
        values = array.astype(float)
    except (TypeError, ValueError):
        raise SmleInputError(f"hits = {describe(hits)} is not numeric; accepted: 0/1 or booleans") from None
    bad = np.flatnonzero((values != 0) & (values != 1))
    if bad.size:
        raise SmleInputError(
            f"hits has values other than 0 and 1 at {bad.size} position(s) (first: index {int(bad[0])}, "
            f"value {float(values[bad[0]])!r}); accepted: 0/1 or booleans"
        )
    return values.astype(np.int64)


def _check_rate(expected_rate) -> float:
    try:
        value = float(expected_rate)
    except (TypeError, ValueError):
        value = float("nan")
    if not 0.0 < value < 1.0:
        raise SmleInputError(
            f"expected_rate = {describe(expected_rate)} is not accepted; accepted: a probability strictly "
            "between 0 and 1 (the value-at-risk level, e.g. 0.01)"
        )
    return value


def _bernoulli_loglik(n_zero, n_one, probability):
    """n_zero log(1 - q) + n_one log q, with 0 log 0 = 0."""
    return xlogy(n_zero, 1.0 - probability) + xlogy(n_one, probability)


def _ratio(numerator: int, denominator: int) -> float:
    return numerator / denominator if denominator else float("nan")


def kupiec_unconditional_coverage(hits, expected_rate: float) -> CoverageTest:
    """Kupiec's (1995) likelihood ratio test of unconditional coverage.

    Args:
      hits: the hit sequence I_t in {0, 1} (booleans accepted), shape (T,), T >= 1.
      expected_rate: the hit probability p under a correct forecast (the VaR level), 0 < p < 1.

    Returns:
      :class:`CoverageTest`.
    """
    values = _check_hits(hits, 1)
    p = _check_rate(expected_rate)
    n_periods, n_hits = values.size, int(values.sum())
    rate = n_hits / n_periods
    statistic = -2.0 * (_bernoulli_loglik(n_periods - n_hits, n_hits, p)
                        - _bernoulli_loglik(n_periods - n_hits, n_hits, rate))
    statistic = float(statistic) if statistic > 0 else 0.0
    return CoverageTest(statistic, float(chi2.sf(statistic, 1)), n_hits, n_periods, rate, p)


def _transition_counts(values: np.ndarray) -> tuple[int, int, int, int]:
    previous, current = values[:-1], values[1:]
    return tuple(int(np.sum((previous == i) & (current == j))) for i in (0, 1) for j in (0, 1))


def _markov_loglik(n00, n01, n10, n11):
    # maximised first-order Markov log-likelihood (0 log 0 = 0: an empty row contributes 0)
    return (_bernoulli_loglik(n00, n01, n01 / max(n00 + n01, 1))
            + _bernoulli_loglik(n10, n11, n11 / max(n10 + n11, 1)))


def christoffersen_independence(hits) -> IndependenceTest:
    """Christoffersen's (1998) likelihood ratio test of independence of the hits.

    Args:
      hits: the hit sequence I_t in {0, 1} (booleans accepted), shape (T,), T >= 2.

    Returns:
      :class:`IndependenceTest`.
    """
    values = _check_hits(hits, 2)
    n00, n01, n10, n11 = _transition_counts(values)
    pi = (n01 + n11) / (values.size - 1)
    statistic = -2.0 * (_bernoulli_loglik(n00 + n10, n01 + n11, pi) - _markov_loglik(n00, n01, n10, n11))
    statistic = float(statistic) if statistic > 0 else 0.0
    return IndependenceTest(statistic, float(chi2.sf(statistic, 1)), n00, n01, n10, n11,
                            _ratio(n01, n00 + n01), _ratio(n11, n10 + n11), pi)


def christoffersen_conditional_coverage(hits, expected_rate: float) -> ConditionalCoverageTest:
    """Christoffersen's (1998) likelihood ratio test of conditional coverage.

    Args:
      hits: the hit sequence I_t in {0, 1} (booleans accepted), shape (T,), T >= 2.
      expected_rate: the hit probability p under a correct forecast (the VaR level), 0 < p < 1.

    Returns:
      :class:`ConditionalCoverageTest`; ``unconditional`` is Kupiec's statistic on I_2..I_T.
    """
    values = _check_hits(hits, 2)
    p = _check_rate(expected_rate)
    independence = christoffersen_independence(values)
    unconditional = kupiec_unconditional_coverage(values[1:], p).statistic
    statistic = unconditional + independence.statistic
    return ConditionalCoverageTest(statistic, float(chi2.sf(statistic, 2)), unconditional,
                                   independence.statistic, p)
