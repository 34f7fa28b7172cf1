"""From fits and forecasts to decisions: model comparison, tests of value-at-risk hit sequences
and of forecast scores.

* :mod:`smle.decision.compare`: several models fitted to the same data, one table with
  log-likelihoods, AIC/BIC and likelihood-ratio tests of nested pairs (:func:`compare`;
  its text and figure in :mod:`smle.decision.compare_report`).

* :mod:`smle.decision.forecast`: h-step predictive distributions of returns and of the variance
  from the filtered state at the end of a fit's sample (:func:`forecast`; its text and fan
  chart in :mod:`smle.decision.forecast_report`).
* :mod:`smle.decision.backtest`: rolling one-step forecasts with warm-started re-estimation, VaR
  hits, coverage tests and out-of-sample log scores (:func:`backtest`; its text and figure in
  :mod:`smle.decision.backtest_report`).
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
from smle.decision.compare import Comparison, ModelSpec, NestedTest, compare
from smle.decision.forecast import Forecast, forecast
from smle.decision.backtest import Backtest, backtest

__all__ = [
    "Comparison",
    "ModelSpec",
    "NestedTest",
    "compare",
    "Forecast",
    "forecast",
    "Backtest",
    "backtest",
    "ConditionalCoverageTest",
    "CoverageTest",
    "DieboldMarianoTest",
    "IndependenceTest",
    "christoffersen_conditional_coverage",
    "christoffersen_independence",
    "diebold_mariano",
    "kupiec_unconditional_coverage",
]
