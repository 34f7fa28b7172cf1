"""Rolling out-of-sample one-step forecasts with re-estimation: :func:`backtest`.

For each period t after the first ``window`` ones, the model's parameters are those estimated on
the ``window`` periods before t (re-estimated every ``refit_every`` forecasts, each fit started
from the previous estimates when that fit converged, and retried from the model's own start
values when a warm start does not converge), and the one-step forecast of period t is formed from those same
``window`` periods, as in :func:`smle.forecast` (horizon 1). Recorded per period:

* the value at risk VaR_p and expected shortfall ES_p at each level p (simulated, with the
  Monte Carlo errors of :mod:`smle.decision.forecast`);
* the hit I_t = 1{r_t < -VaR_p}: under a correct forecast the hits are i.i.d. Bernoulli(p);
* the out-of-sample log score log p(r_t | r_{t-window}..r_{t-1}) at the current estimates, exact:
  the closed form for ``garch``, the Kalman or exact grid filter of :mod:`smle.exact_likelihood`
  otherwise (Gneiting and Raftery 2007, J. American Statistical Association 102).

The hit sequences are tested by Kupiec's (1995) unconditional coverage test and Christoffersen's
(1998) independence and conditional coverage tests (:mod:`smle.decision.coverage`); two
backtests over the same periods are compared by the Diebold-Mariano (1995) test of their log
scores (:meth:`Backtest.compare`, :mod:`smle.decision.scores`).

A period's VaR carries Monte Carlo error (``var_se``); a return within that error of -VaR may
count as a hit or not depending on the seed. Parameter uncertainty is not in the forecasts.
Test outcomes are statistical output, not advice (:data:`smle.results.CAUTION`).
"""

from __future__ import annotations

import dataclasses
import functools
import sys
import time

import jax
import jax.numpy as jnp
import numpy as np

from smle.decision.coverage import (christoffersen_conditional_coverage, christoffersen_independence,
                                    kupiec_unconditional_coverage)
from smle.decision.report_files import JsonReport
from smle.decision.forecast import check_forecast_model, check_levels, path_statistics, simulate_paths
from smle.decision.scores import diebold_mariano
from smle.errors import SmleInputError, describe
from smle.exact_likelihood import resolve_method
from smle.fit import fit
from smle.models import Model, get_model
from smle.models.base import model_options
from smle.results import CAUTION
from smle.validation import check_integer, check_observations, jax_params

FORMAT = "smle.backtest/1"
_ARRAYS = ("periods", "realized", "value_at_risk", "var_se", "expected_shortfall", "hits", "log_score")


@dataclasses.dataclass
class Backtest(JsonReport):
    """The outcome of :func:`backtest`.

    Attributes:
      model, model_options: the model backtested.
      window, refit_every, levels, n_paths, seed: the settings.
      periods: the forecast periods t (0-based rows of y), shape (N,); dates: their dates or None.
      realized: r_t, shape (N,).
      value_at_risk, var_se, expected_shortfall, hits: per level and period, shape (L, N).
      log_score: the out-of-sample log predictive density of r_t, shape (N,).
      refits: one entry per estimation: ``period`` (first period forecast with it), ``params``,
        ``converged``, ``loglik``.
      elapsed_seconds: wall-clock time of the blocks, summed (over the runs that computed them when
        a stored backtest was resumed).
    """

    model: str
    model_options: dict
    window: int
    refit_every: int
    levels: tuple
    n_paths: int
    seed: int
    periods: np.ndarray
    dates: list | None
    realized: np.ndarray
    value_at_risk: np.ndarray
    var_se: np.ndarray
    expected_shortfall: np.ndarray
    hits: np.ndarray
    log_score: np.ndarray
    refits: list
    elapsed_seconds: float

    def coverage(self) -> list[dict]:
        """Per level: ``level``, ``kupiec`` (:class:`CoverageTest`), ``independence`` and
        ``conditional`` (Christoffersen 1998)."""
        return [{"level": p, "kupiec": kupiec_unconditional_coverage(self.hits[i], p),
                 "independence": christoffersen_independence(self.hits[i]),
                 "conditional": christoffersen_conditional_coverage(self.hits[i], p)}
                for i, p in enumerate(self.levels)]

    def compare(self, other: "Backtest", **options):
        """Diebold-Mariano test of equal expected log score against ``other`` (same periods);
        a positive mean difference favours this backtest. ``options`` go to
        :func:`smle.decision.scores.diebold_mariano`."""
        if not isinstance(other, Backtest) or not np.array_equal(self.periods, other.periods):
            raise SmleInputError("other must be a Backtest over the same periods (same data, window and length); "
                                 f"got {describe(other)}")
        mine, theirs = (get_model(b.model, **b.model_options).n_series for b in (self, other))
        if mine != theirs:
            raise SmleInputError(
                f"other scores {theirs} observed series per day and this backtest {mine} (model '{self.model}' against "
                f"'{other.model}'): log scores compare only forecasts of the same observations (a model with a "
                "realized measure scores the return and the measure together); accepted: backtests of models of the "
                "same series")
        return diebold_mariano(self.log_score, other.log_score, **options)

    def to_frame(self):
        """A pandas DataFrame, one row per forecast period: realized, log score, VaR/ES and hits."""
        import pandas as pd

        columns = {"period": self.periods, "realized": self.realized, "log_score": self.log_score}
        for i, p in enumerate(self.levels):
            columns.update({f"VaR_{p:g}": self.value_at_risk[i], f"VaR_{p:g}_se": self.var_se[i],
                            f"ES_{p:g}": self.expected_shortfall[i], f"hit_{p:g}": self.hits[i]})
        frame = pd.DataFrame(columns)
        if self.dates is not None:
            frame.index = pd.Index(self.dates, name="date")
        return frame

    def to_dict(self) -> dict:
        out = {"format": FORMAT}
        for field in dataclasses.fields(self):
            value = getattr(self, field.name)
            out[field.name] = np.asarray(value).tolist() if field.name in _ARRAYS else (
                list(value) if isinstance(value, tuple) else value)
        out["caution"] = CAUTION
        return out

    def summary(self) -> str:
        from smle.decision.backtest_report import summary_text

        return summary_text(self)

    def figure(self, path=None):
        from smle.decision.backtest_report import backtest_figure

        return backtest_figure(self, path)


@functools.lru_cache(maxsize=None)
def _closed_form_scores(model: Model):
    return jax.jit(model.log_predictive)


def one_step(model: Model, params: dict, y, levels, n_paths: int, seed: int) -> tuple[dict, float]:
    """The one-step forecast of the last row of ``y`` from the rows before it, at ``params`` (JAX
    scalars by name): ``(statistics of the return, log score)``. The log score log p(y_T | y_1..
    y_{T-1}) is exact; with a latent state one filter run over ``y`` gives it and the law of the
    state at T - 1 that the forecast paths start from."""
    y = jnp.asarray(y, float)
    if model.state_dim == 0:
        score, filtered = float(_closed_form_scores(model)(params, y)[-1]), None
    else:
        from smle.exact_likelihood import exact_run

        run = exact_run(model, params, y)
        score, filtered = float(run.log_predictive[-1]), (y, run, -2)
    paths, _ = simulate_paths(model, params, y[:-1], 1, n_paths, seed, filtered)
    return path_statistics(paths["return"], (0.5,), levels, tails=True), score


def step_seed(seed: int, step: int) -> int:
    """The seed of one forecast step: a function of the backtest's seed and the step."""
    return int(np.random.SeedSequence([seed, step]).generate_state(1)[0])


WARM_START_REACH = 8.0
"""A previous estimate whose unconstrained coordinates exceed this in absolute value (within about
e^-8 of a boundary of the admissible region) is not used as a start (common practice: a start on
the boundary can hold the optimiser where the gradient vanishes)."""


def _refit(model, y, start, **options):
    """The fit on one window, warm-started from ``start`` (None: the model's own start values).

    A GARCH estimate with omega near 0 held warm-started fits where the gradient vanishes
    (measured: 44 of 50 fits of a garch backtest stopped there, and one "converged" 2.9 below the
    maximum), so a start near the boundary (:data:`WARM_START_REACH`) is not used, and a warm start
    that does not converge is retried from the model's start values, the higher likelihood kept.
    """
    if start is not None and not bool(np.all(np.abs(np.asarray(model.to_real(start))) < WARM_START_REACH)):
        start = None
    result = fit(model, y, start=start, verbose=False, **options)
    if start is None or result.converged:
        return result
    cold = fit(model, y, verbose=False, **options)
    return cold if cold.converged or cold.loglik > result.loglik else result


def reporter(progress):
    """A callable receiving progress messages: stderr for True, none for False or None, else ``progress``."""
    if progress is True:
        return lambda message: print(message, file=sys.stderr, flush=True)
    return progress or None


def _check_settings(model, y, window, refit_every):
    window = check_integer("window", window, max(model.min_periods, 20))
    refit_every = check_integer("refit_every", refit_every, 1)
    if y.shape[0] <= window:
        raise SmleInputError(f"window = {window} leaves no period to forecast in y of {y.shape[0]} periods; "
                             "accepted: a window shorter than the data")
    return window, refit_every


@dataclasses.dataclass(frozen=True)
class BacktestPlan:
    """The checked settings of a backtest and its blocks: block b re-estimates on the ``window``
    periods before its first forecast period and forecasts ``refit_every`` periods (fewer in the
    last block) with those estimates. A block's numbers depend only on the plan, its index and the
    estimates it is warm-started from, so blocks can be run, stored and resumed one at a time."""

    model: Model
    y: np.ndarray
    window: int
    refit_every: int
    levels: tuple
    n_paths: int
    seed: int
    dates: list | None
    periods: np.ndarray

    @property
    def n_blocks(self) -> int:
        return -(-self.periods.size // self.refit_every)

    def block_steps(self, block: int) -> range:
        """The forecast steps (indices into ``periods``) of ``block``."""
        return range(block * self.refit_every, min((block + 1) * self.refit_every, self.periods.size))


def plan_backtest(model, y, window, refit_every, levels=(0.01, 0.05), n_paths=10000, seed=0,
                  dates=None) -> BacktestPlan:
    """Check the arguments of :func:`backtest` (same meanings) and return its :class:`BacktestPlan`."""
    model = get_model(model)
    check_forecast_model(model)
    levels = check_levels(levels)
    y = check_observations(model, y)
    window, refit_every = _check_settings(model, y, window, refit_every)
    check_integer("n_paths", n_paths, 100)
    seed = check_integer("seed", seed, 0)
    if dates is not None and len(dates) != y.shape[0]:
        raise SmleInputError(f"dates has {len(dates)} entries for {y.shape[0]} periods; accepted: one per period")
    return BacktestPlan(model, np.asarray(y), window, refit_every, levels, n_paths, seed,
                        None if dates is None else list(dates), np.arange(window, y.shape[0]))


def run_block(plan: BacktestPlan, block: int, start: dict | None, fixed=None, **fit_options) -> dict:
    """Re-estimate and forecast one block of ``plan``.

    Args:
      start: the estimates to warm-start from (the previous block's, when that fit converged), or
        None for the model's own start values.
      fixed, fit_options: as in :func:`backtest`.

    Returns:
      ``{"block", "refit", "value_at_risk", "var_se", "expected_shortfall", "log_score",
      "seconds"}``: ``refit`` as in :attr:`Backtest.refits`, the arrays of shape (L, n) and (n,)
      for the block's n forecasts. The fit's seed is the backtest's and each forecast's seed is
      :func:`step_seed` of the backtest's seed and the step, so a block's numbers are a function of
      the plan, the block index and ``start`` (the seed is passed to EIS fits only; the exact and
      closed-form fits use none).
    """
    began, steps = time.perf_counter(), plan.block_steps(block)
    first = int(plan.periods[steps[0]])
    # the seed matters only to EIS fits (passed to the others, fit warns that it is unused)
    seeded = {"seed": plan.seed} if resolve_method(plan.model, fit_options.get("method", "auto")) == "eis" else {}
    result = _refit(plan.model, plan.y[first - plan.window:first], start, fixed=fixed, **seeded, **fit_options)
    params = {k: float(v) for k, v in result.params.items()}
    var, var_se, es = (np.empty((len(plan.levels), len(steps))) for _ in range(3))
    scores = np.empty(len(steps))
    for column, step in enumerate(steps):
        t = int(plan.periods[step])
        part, scores[column] = one_step(plan.model, jax_params(params), plan.y[t - plan.window:t + 1], plan.levels,
                                        plan.n_paths, step_seed(plan.seed, step))
        var[:, column], var_se[:, column], es[:, column] = part["var"][:, 0], part["var_se"][:, 0], part["es"][:, 0]
    return {"block": block, "refit": {"period": first, "params": params, "converged": bool(result.converged),
                                      "loglik": float(result.loglik)},
            "value_at_risk": var, "var_se": var_se, "expected_shortfall": es, "log_score": scores,
            "seconds": time.perf_counter() - began}


def warm_start(previous: dict | None) -> dict | None:
    """The start of the block after ``previous`` (a :func:`run_block` result): its estimates if its
    fit converged, else None (the model's own start values)."""
    return previous["refit"]["params"] if previous is not None and previous["refit"]["converged"] else None


def block_message(plan: BacktestPlan, done: dict, elapsed: float) -> str:
    """The progress line after block ``done`` (a :func:`run_block` result) has finished."""
    refit, steps = done["refit"], plan.block_steps(done["block"])
    return (f"backtest: block {done['block'] + 1}/{plan.n_blocks} done, forecasts {steps[-1] + 1}/"
            f"{plan.periods.size} (rows {refit['period']}..{plan.periods[steps[-1]]}): log-likelihood "
            f"{refit['loglik']:.3f}{'' if refit['converged'] else ' (not converged)'}, {elapsed:.1f} s")


def assemble(plan: BacktestPlan, blocks: list) -> Backtest:
    """The :class:`Backtest` of ``plan`` from its :func:`run_block` results, in block order (all of
    them; the elapsed time is the sum of the blocks' own times)."""
    if [b["block"] for b in blocks] != list(range(plan.n_blocks)):
        raise ValueError(f"blocks {[b['block'] for b in blocks]} are not the {plan.n_blocks} blocks of the plan")
    var, var_se, es = (np.concatenate([np.asarray(b[key], float).reshape(len(plan.levels), -1) for b in blocks], axis=1)
                       for key in ("value_at_risk", "var_se", "expected_shortfall"))
    scores = np.concatenate([np.asarray(b["log_score"], float) for b in blocks])
    periods, y = plan.periods, plan.y
    realized = y[periods] if y.ndim == 1 else y[periods, 0]
    hits = (realized[None, :] < -var).astype(np.int64)
    return Backtest(plan.model.name, model_options(plan.model), plan.window, plan.refit_every, plan.levels,
                    plan.n_paths, plan.seed, periods,
                    None if plan.dates is None else [str(plan.dates[t]) for t in periods], realized, var, var_se, es,
                    hits, scores, [b["refit"] for b in blocks], float(sum(b["seconds"] for b in blocks)))


def backtest(model, y, window: int, refit_every: int, levels=(0.01, 0.05), n_paths: int = 10000, seed: int = 0,
             fixed=None, dates=None, progress=True, **fit_options) -> Backtest:
    """Rolling one-step forecasts of the last ``T - window`` periods of ``y``, re-estimating.

    Args:
      model: a registered name or model instance with a state of dimension 0 or 1.
      y: the observations, shape (T,) or (T, n_series); the first series is forecast.
      window: periods in each estimation and forecasting window (a rolling window).
      refit_every: forecasts between re-estimations (warm-started from the previous estimates).
      levels: tail probabilities of the VaR and ES.
      n_paths: simulated paths per one-step forecast (the VaR's Monte Carlo error falls as
        1 / sqrt(n_paths)).
      seed: every random result (fits' draws, forecast paths) is a function of it.
      fixed: parameters held at given values in every fit.
      dates: the date of each row of ``y`` (optional; labels the forecast periods).
      progress: True (messages on stderr), False, or a callable receiving each message.
      fit_options: passed to :func:`smle.fit` (e.g. ``n_draws``, ``max_steps``).

    Returns:
      A :class:`Backtest` (``coverage()``, ``compare()``, ``summary()``, ``to_frame()``, ``figure()``).
      :func:`smle.backtest` with ``store=`` (:mod:`smle.study.backtest_runs`) keeps the blocks in a store, so
      that a stopped backtest resumes.
    """
    plan = plan_backtest(model, y, window, refit_every, levels, n_paths, seed, dates)
    say, blocks, began = reporter(progress), [], time.perf_counter()
    for block in range(plan.n_blocks):
        blocks.append(run_block(plan, block, warm_start(blocks[-1] if blocks else None), fixed, **fit_options))
        if say:
            say(block_message(plan, blocks[-1], time.perf_counter() - began))
    return assemble(plan, blocks)
