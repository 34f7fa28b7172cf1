"""From forecasts to decisions: tests of value-at-risk hit sequences and of forecast scores.

This package depends on NumPy and SciPy only.

* :mod:`smle.decision.coverage`: Kupiec's (1995) unconditional coverage test, Christoffersen's
  (1998) independence and conditional coverage tests of a hit sequence.
* :mod:`smle.decision.scores`: the Diebold-Mariano (1995) test of equal predictive accuracy of
  two score sequences, with a Newey-West long-run variance and the Harvey-Leybourne-Newbold
  (1997) small-sample correction.

Test outcomes are statistical output, not advice (:data:`smle.results.CAUTION`).
"""

from smle.decision.coverage import (
    ConditionalCoverageTest,
    CoverageTest,
    IndependenceTest,
    christoffersen_conditional_coverage,
    christoffersen_independence,
    kupiec_unconditional_coverage,
)
from smle.decision.scores import DieboldMarianoTest, diebold_mariano

__all__ = [
    "ConditionalCoverageTest",
    "CoverageTest",
    "DieboldMarianoTest",
    "IndependenceTest",
    "christoffersen_conditional_coverage",
    "christoffersen_independence",
    "diebold_mariano",
    "kupiec_unconditional_coverage",
]
