"""Goodness of fit after a fit: PITs, normal scores, residual tests and a report.

:func:`diagnose` filters the factor at a fit's estimates (:func:`smle.filter_factor`: exactly, by the
Kalman filter or the grid filter, for the exact and closed-form routes; by the guided particle filter
for an EIS fit or on request), turns each observation into its probability integral transform (PIT) under the one-step
predictive law and into a normal score ``z_t = Phi^{-1}(PIT_t)``, and tests what a correct
model implies: the PITs are i.i.d. uniform, so the scores are i.i.d. N(0, 1) (Rosenblatt 1952,
Ann. Math. Statist. 23; Diebold, Gunther and Tay 1998, International Economic Review 39).

The tests (each a :class:`TestResult`; p-values below 5% are flagged as remaining effects, which
is common practice, not a property of the tests):

* Ljung-Box Q of the scores and of the squared scores at chosen lags (Ljung and Box 1978,
  Biometrika 65), chi-squared with as many degrees of freedom as lags;
* the ARCH Lagrange-multiplier test (Engle 1982, Econometrica 50): T' R^2 of the regression of
  z_t^2 on a constant and q of its lags, chi-squared(q);
* the Durbin-Watson statistic of the scores (Durbin and Watson 1950, Biometrika 37), near 2
  without first-order autocorrelation (a statistic without a p-value here);
* Kolmogorov-Smirnov test of uniformity of the PITs (scipy.stats.kstest);
* the Berkowitz (2001, J. Business & Economic Statistics 19, 465-474) likelihood-ratio test: the
  exact Gaussian AR(1) likelihood of the scores maximised over (mean, variance, AR coefficient)
  against (0, 1, 0), chi-squared(3);
* the Jarque-Bera test of normality of the scores (Jarque and Bera 1987, International Statistical
  Review 55): skewness and excess kurtosis, chi-squared(2) (scipy.stats.jarque_bera);
* a tail test in the manner of Berkowitz's censored test, here on both tails: scores inside
  (Phi^{-1}(p), Phi^{-1}(1 - p)) are censored (only their count enters), the tails keep their
  normal density, and the LR of (mean, variance) against (0, 1) is chi-squared(2). It reacts to
  tails heavier or lighter than the model's (our two-sided variant of Berkowitz's section 3);
* on the latent factor: Ljung-Box of the standardised AR(1) innovations
  ``(x_t - mu - phi (x_{t-1} - mu)) / sigma_eta`` of one path drawn from the smoothing
  distribution at the estimates, and of their squares, and their Durbin-Watson statistic. Under a
  correct model a path drawn from the posterior has the law of the true path, so its innovations
  are i.i.d. N(0, 1) (the idea of realized discrepancies, Gelman, Meng and Stern 1996, Statistica
  Sinica 6); the innovations of the smoothed *mean* are not (smoothing correlates them), so they
  are not tested. The path is drawn exactly by backward simulation after the exact filter
  (:mod:`smle.diagnostics.factor_path`), and these tests are flagged at 5% (``EXACT_PATH_LEVEL``);
  on the particle route it is an EIS scoring path picked by importance weight, only approximately
  a posterior draw, and they are flagged at ``FACTOR_PATH_LEVEL`` (1%). Either way they are counted
  apart from the tests of the observations: another seed draws another path. A k-dimensional
  state (a Gaussian VAR(1)) takes the particle route (the filter in k dimensions gives one PIT per
  series) and its path tests run per component on the whitened innovations
  ``L^{-1}(x_t - c - Phi x_{t-1})``, ``L L' = Q``.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path
from typing import Callable, Sequence

import numpy as np
from scipy import stats

from smle.errors import SmleInputError, describe
from smle.diagnostics.residual_tests import (  # noqa: F401 (public names of gof)
    PIT_CLIP, arch_lm, autocorrelations, check_lags, berkowitz_test, durbin_watson, ljung_box, normal_scores, tail_test,
)
from smle.diagnostics.factor_path import (  # noqa: F401 (public names of gof)
    EXACT_PATH_LEVEL, FACTOR_PATH_LEVEL, PATH_CANDIDATES, exact_posterior_path, factor_innovations, posterior_path,
)
from smle.diagnostics.filtering import (
    FilterResult, check_filter_settings, filter_factor, has_obs_cdf, no_state_message, resolve_filter_method,
)
from smle.exact_likelihood import EXACT_TOL, check_exact_tol, resolve_method
from smle.validation import check_observations
from smle import report_text as layout
from smle.models import model_title, saved_model
from smle.results import CAUTION, FitResult, exact_engine_text, low_ess_warning

SIGNIFICANCE = 0.05  # common practice

FILTER_LOW_ESS_FRACTION = 0.01
"""A period whose particle-filter ESS is below this fraction of the particles is flagged (common
practice, a rule of thumb: fewer than 20 of 2000 particles then carry that period's PIT; dips to
a few per cent after an outlier are ordinary for a filter that resamples at one half)."""

DIAGNOSE_METHODS = ("auto", "exact", "particles")


# ---------------------------------------------------------------------------------------------
# The report


@dataclasses.dataclass(frozen=True)
class TestResult:
    """One test: what it is applied to, its statistic, degrees of freedom and p-value.

    ``p_value`` is None for a statistic without one (Durbin-Watson); ``level`` is the p-value below
    which the test is flagged: ``SIGNIFICANCE`` (5%), or ``FACTOR_PATH_LEVEL`` for the tests on a
    factor path drawn by EIS, whose size at 5% is distorted (see ``FACTOR_PATH_LEVEL``);
    ``factor_path``: whether the test is on a drawn factor path (counted apart in the report).
    """

    test: str
    subject: str
    statistic: float
    df: int | None
    p_value: float | None
    level: float = SIGNIFICANCE
    factor_path: bool = False

    @property
    def flagged(self) -> bool:
        return self.p_value is not None and self.p_value < self.level

    @property
    def on_factor_path(self) -> bool:
        return self.factor_path or self.level != SIGNIFICANCE


@dataclasses.dataclass
class Diagnostics:
    """Goodness of fit of a fitted model.

    Attributes:
      model: the model name; series: a label per observed series.
      filter: the :class:`~smle.diagnostics.filtering.FilterResult` at the estimates.
      pit, scores: PITs and normal scores, shape (T, n_series).
      factor_path: one path of the factor drawn from the smoothing distribution, shape (T,);
      factor_innovations: its standardised AR(1) innovations, shape (T - 1,). For a k-dimensional
        state these and the smoothed factor below have a trailing component axis ((T, k), (T - 1, k))
        and the factor-path tests are run per component (``Model.component_names``).
      smoothed_mean, smoothed_lower, smoothed_upper: the smoothed factor (for figures): the exact
        smoother's at the estimates on the exact route, the fit's own on the particle route.
      tests: the :class:`TestResult` list; fit_loglik, fit_nse: the fit's log-likelihood and its NSE
        (0 for an exact or closed-form fit); fit_method: how the fit computed it ("EIS", "exact").
      path_source: how the factor path was drawn, in words.
      params, model_options: the fit's estimates and model options (the figures show the factor as
        the model displays it, ``Model.factor_display``).
      dates: the date of each period (from the fit), or None; the figures' time axis.
    """

    model: str
    series: list
    filter: FilterResult
    pit: np.ndarray
    scores: np.ndarray
    factor_innovations: np.ndarray
    factor_path: np.ndarray
    smoothed_mean: np.ndarray
    smoothed_lower: np.ndarray
    smoothed_upper: np.ndarray
    tests: list
    fit_loglik: float
    fit_nse: float
    params: dict | None = None
    model_options: dict | None = None
    dates: list | None = None
    fit_method: str = "EIS"
    path_source: str = ""

    @property
    def flagged(self) -> list:
        """The flagged tests (remaining effects): p below each test's ``level``."""
        return [t for t in self.tests if t.flagged]

    def summary(self) -> str:
        """Plain text in smle's report layout (:mod:`smle.report_text`); flagged tests end in ``<- flagged``."""
        f = self.filter
        observed = [t for t in self.tests if not t.on_factor_path]
        path = [t for t in self.tests if t.on_factor_path]
        path_level = path[0].level if path else SIGNIFICANCE
        path_note = "an exact posterior draw" if path_level == EXACT_PATH_LEVEL else "an approximate posterior draw"
        return layout.render(
            layout.title("goodness of fit", f"model {model_title(self.model, self.model_options)}", f"{f.filtered_mean.shape[0]} periods"),
            [self._filter_block(),
             layout.block(f"Tests of the observations (flagged below p = {SIGNIFICANCE:g})",
                          [_test_line(t) for t in observed]),
             layout.block(f"Tests of a drawn factor path (flagged below p = {path_level:g}: the path is "
                          f"{path_note})", ([self.path_source] if self.path_source else [])
                          + [_test_line(t) for t in path]),
             layout.block("Reading", self._reading(observed, path))],
            CAUTION)

    def _fit_text(self) -> str:
        if self.fit_method == "EIS":
            return f"EIS {self.fit_loglik:.3f} (NSE {self.fit_nse:.3f})"
        return f"fit ({self.fit_method}) {self.fit_loglik:.3f}"

    def _filter_block(self) -> list[str]:
        f = self.filter
        if not f.simulated:
            return layout.block("Exact filter (no simulation noise)", [
                layout.field("filter", exact_engine_text({"grid_size": f.grid_size, "error_bound": f.error_bound})),
                layout.field("log-likelihood", f"filter {f.loglik:.3f}, {self._fit_text()}"),
            ])
        lowest = int(np.argmin(f.ess))
        low_periods = int(np.sum(f.ess < FILTER_LOW_ESS_FRACTION * f.n_particles))
        return layout.block("Guided particle filter", [
            layout.field("particles", f"{f.n_particles}, seed {f.seed}, resampled after {f.resample_count} periods"),
            layout.field("lowest ESS", f"{f.ess[lowest]:.0f} of {f.n_particles} particles (period {lowest}); "
                                       f"{low_periods} period{'' if low_periods == 1 else 's'} below {FILTER_LOW_ESS_FRACTION:.0%}"),
            *low_ess_warning(float(f.ess[lowest]), f.n_particles, "particles", f" in period {lowest}",
                             FILTER_LOW_ESS_FRACTION),
            layout.field("log-likelihood", f"filter {f.loglik:.3f}, {self._fit_text()}"),
        ])

    def _reading(self, observed, path) -> list[str]:
        flagged = [t for t in observed if t.flagged]
        lines = [f"{len(flagged)} of {sum(t.p_value is not None for t in observed)} tests of the observations "
                 f"flag remaining effects at {SIGNIFICANCE:g}"
                 + (": " + "; ".join(f"{t.test} of {t.subject}" for t in flagged) if flagged else "")]
        if path:
            below_5 = sum(t.p_value is not None and t.p_value < SIGNIFICANCE for t in path)
            strong = [t for t in path if t.flagged]
            counted = f"factor path: {below_5} of {sum(t.p_value is not None for t in path)} tests below {SIGNIFICANCE:g}"
            named = ": " + "; ".join(f"{t.test} of {t.subject}" for t in strong) if strong else ""
            if path[0].level == EXACT_PATH_LEVEL:
                lines.append(f"{counted} (counted apart: another seed draws another path; drawn exactly, these tests "
                             f"hold their size){named}")
            else:
                lines.append(f"{counted} (counted apart: the path is an approximate posterior draw, which can make "
                             f"these reject more often than {SIGNIFICANCE:.0%} under a correct model); {len(strong)} "
                             f"below {path[0].level:g}{named}")
        lines += [
            "under a correct model the PITs are i.i.d. uniform and the scores i.i.d. N(0, 1): about 1 test in 20",
            "flags by chance; Durbin-Watson near 2 means no first-order autocorrelation",
        ]
        return lines

    def __str__(self) -> str:
        return self.summary()

    def to_dict(self) -> dict:
        """JSON-ready contents: tests and per-period arrays."""
        return {
            "format": "smle.diagnostics/1",
            "model": self.model,
            "series": list(self.series),
            "filter_method": self.filter.method,
            "filter_engine": self.filter.engine,
            "grid_size": self.filter.grid_size,
            "error_bound": self.filter.error_bound,
            "n_particles": self.filter.n_particles,
            "seed": self.filter.seed,
            "filter_loglik": self.filter.loglik,
            "fit_method": self.fit_method,
            "factor_path_source": self.path_source,
            "fit_loglik": self.fit_loglik,
            "fit_nse": self.fit_nse,
            "tests": [dict(dataclasses.asdict(t), flagged=t.flagged) for t in self.tests],
            "pit": self.pit.tolist(),
            "filtered_mean": self.filter.filtered_mean.tolist(),
            "filtered_lower": self.filter.filtered_lower.tolist(),
            "filtered_upper": self.filter.filtered_upper.tolist(),
            "log_predictive": self.filter.log_predictive.tolist(),
            "caution": CAUTION,
        }

    def write(self, folder) -> list[Path]:
        """Text, JSON and the four figures into ``folder``; returns the paths written."""
        from smle.diagnostics import plots

        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        written = [folder / "diagnostics.txt", folder / "diagnostics.json"]
        written[0].write_text(self.summary() + "\n")
        written[1].write_text(json.dumps(self.to_dict(), indent=1))
        written += plots.diagnostics_figures(self, folder)
        return written


def _check_fit_result(result) -> FitResult:
    if not isinstance(result, FitResult):
        raise SmleInputError(
            f"fit_result must be an smle.FitResult (from smle.fit or FitResult.from_json); got {describe(result)}"
        )
    return result


def diagnose(
    fit_result: FitResult,
    y=None,
    n_particles: int = 2000,
    seed: int = 0,
    lags: Sequence[int] = (5, 10, 20),
    arch_lags: int = 5,
    tail_probability: float = 0.01,
    progress: Callable[[str], None] | None = None,
    method: str = "auto",
    exact_tol: float = EXACT_TOL,
) -> Diagnostics:
    """Goodness of fit of a fitted model: filter, PITs, normal scores and residual tests.

    Args:
      fit_result: a :class:`~smle.results.FitResult`.
      y: the observations the model was fitted to (default: ``fit_result.observations``).
      n_particles: particles of the guided particle filter (``method="particles"`` route).
      seed: non-negative integer; seeds the particle filter and the draw of the factor path.
      lags: Ljung-Box lags; arch_lags: lags of the ARCH-LM regression.
      tail_probability: probability of each tail in the censored tail test.
      progress: optional callback receiving short progress messages.
      method: "auto" (default: the route of the fit: exact for an exact fit, which ``smle.fit``
        makes by default for a one-dimensional state, particles for an EIS fit, exact for an EIS fit
        of a model whose transition uses the data, which the particle filter does not model), "exact" (the
        exact filter's PITs and predictive densities and a path drawn exactly from the smoothing
        distribution, whatever the fit) or "particles" (the guided particle filter's PITs and a
        path picked among EIS scoring draws: the simulated routes).
      exact_tol: accuracy of the exact filter's log-likelihood (log-likelihood units).

    Returns:
      A :class:`Diagnostics` report.

    References: Diebold, Gunther and Tay (1998), International Economic Review 39; Berkowitz
    (2001), J. Business & Economic Statistics 19; Ljung and Box (1978); Engle (1982).
    """
    result = _check_fit_result(fit_result)
    model = saved_model(result.model, result.model_options)
    y = _checked_observations(model, result, y)
    if model.state_dim == 0:
        raise SmleInputError(no_state_message(model))
    if not has_obs_cdf(model):
        raise SmleInputError(f"model '{model.name}' has no conditional CDF (obs_cdf), so no PITs can be formed")
    route = _diagnose_route(model, result, method)
    check_filter_settings(n_particles, 0.5, model.state_dim)
    exact_tol = check_exact_tol(exact_tol)
    lags = check_lags(lags, y.shape[0])
    check_lags(arch_lags, y.shape[0] - 1)
    if progress:
        progress(f"filtering {y.shape[0]} periods " + ("exactly" if route == "exact" else f"with {n_particles} "
                 "particles") + " (the first call compiles)")
    filtered = filter_factor(model, result.params, y, n_particles=n_particles, seed=seed, method=route,
                             exact_tol=exact_tol, smooth=False)  # the figures use the fit's smoothed factor
    pit = filtered.pit
    scores = normal_scores(pit)
    series = list(model.series_labels[:model.n_series])
    if progress:
        progress("residual tests")
    tests = []
    for k, label in enumerate(series):
        tests += _series_tests(label, scores[:, k], pit[:, k], lags, arch_lags, tail_probability)
    if progress:
        progress("drawing a factor path from the smoothing distribution "
                 + ("(backward simulation after the exact filter)" if route == "exact" else "(EIS at the estimates)"))
    path, path_source, level = _factor_path(model, result, y, seed, route, exact_tol)
    innovations = factor_innovations(model, result.params, path)
    names = [f" of {name}" for name in model.component_names()] if model.state_dim > 1 else [""]
    for column, name in zip(innovations.reshape(innovations.shape[0], -1).T, names):
        tests += _factor_tests(column, lags, level, name)
    smoothed = filtered if route == "exact" else result
    return Diagnostics(
        model=model.name, series=series, filter=filtered, pit=pit, scores=scores,
        factor_innovations=innovations, factor_path=path,
        smoothed_mean=np.asarray(smoothed.smoothed_mean), smoothed_lower=np.asarray(smoothed.smoothed_lower),
        smoothed_upper=np.asarray(smoothed.smoothed_upper), tests=tests, fit_loglik=result.loglik,
        fit_nse=result.nse, params=dict(result.params), model_options=dict(result.model_options or {}),
        dates=getattr(result, "dates", None), fit_method=result.method, path_source=path_source,
    )


def _checked_observations(model, result: FitResult, y) -> np.ndarray:
    if y is None:
        y = result.observations
        if y is None:
            raise SmleInputError(
                "y = None and the fit result stores no observations; pass the observations the model was fitted to"
            )
    y = check_observations(model, y)
    if y.shape[0] != result.n_obs:
        raise SmleInputError(
            f"y has {y.shape[0]} periods but the fit of model '{result.model}' used {result.n_obs}; "
            "accepted: the observations the model was fitted to"
        )
    return y


def _diagnose_route(model, result: FitResult, method) -> str:
    """"exact" or "particles" (see :func:`diagnose`'s ``method``)."""
    if method not in DIAGNOSE_METHODS:
        raise SmleInputError(f"method = {method!r} is not accepted; accepted: 'auto' (the fit's route), 'exact' or "
                             "'particles' (the particle filter and an EIS-drawn factor path)")
    if model.state_dim > 1:  # particles: no grid covers k dimensions
        return resolve_filter_method(model, method)
    # a simulated fit's route is the particle filter, except where it does not model the transition
    # (one that uses the data: leverage), which the exact filter covers
    if method == "particles" or (method == "auto" and result.simulated and not model.transition_uses_data):
        return "particles"
    return resolve_method(model, "exact")


def _factor_path(model, result: FitResult, y, seed, route: str, exact_tol: float):
    """``(path, how it was drawn in words, flagging level of its tests)``."""
    if route == "exact":
        path, size = exact_posterior_path(model, result.params, y, seed, exact_tol)
        where = "the Kalman filter's Gaussian laws" if size == 0 else f"a grid of {size} points"
        return path, f"path: backward simulation on {where}, seed {seed}", EXACT_PATH_LEVEL
    return (posterior_path(model, result, y, seed),
            f"path: one of {PATH_CANDIDATES} EIS scoring draws picked by importance weight, seed {seed}",
            FACTOR_PATH_LEVEL)


def _test_line(t: TestResult) -> str:
    """One test in the report: ``test of subject: statistic (df), p``, and ``<- flagged`` when flagged."""
    df = "" if t.df is None else f" (df {t.df})"
    p = "" if t.p_value is None else f", p {t.p_value:.4f}"
    return f"{t.test} of {t.subject}: {t.statistic:.3f}{df}{p}" + ("  <- flagged" if t.flagged else "")


def _ljung_box_tests(x, lags, applied_to: str, level: float = SIGNIFICANCE) -> list[TestResult]:
    q, p = ljung_box(x, lags)
    return [TestResult("Ljung-Box", applied_to, float(qi), int(h), float(pi), level)
            for qi, pi, h in zip(q, p, lags)]


def _series_tests(label: str, z, pit, lags, arch_lags: int, tail_probability: float) -> list[TestResult]:
    """The tests of one observed series: its normal scores ``z`` and PITs."""
    tests = _ljung_box_tests(z, lags, f"{label} scores") + _ljung_box_tests(z**2, lags, f"{label} squared scores")
    lm, p_lm = arch_lm(z, arch_lags)
    tests.append(TestResult("ARCH-LM", f"{label} scores", lm, int(arch_lags), p_lm))
    tests.append(TestResult("Durbin-Watson", f"{label} scores", durbin_watson(z), None, None))
    ks = stats.kstest(pit, "uniform")
    tests.append(TestResult("Kolmogorov-Smirnov", f"{label} PITs", float(ks.statistic), None, float(ks.pvalue)))
    b = berkowitz_test(z)
    tests.append(TestResult("Berkowitz LR", f"{label} scores", b["statistic"], 3, b["p_value"]))
    jb = stats.jarque_bera(z)
    tests.append(TestResult("Jarque-Bera", f"{label} scores", float(jb.statistic), 2, float(jb.pvalue)))
    tail = tail_test(z, tail_probability)
    tests.append(TestResult(f"tails LR ({tail_probability:.0%} each)", f"{label} scores",
                            tail["statistic"], 2, tail["p_value"]))
    return tests


def _factor_tests(innovations, lags, level: float = FACTOR_PATH_LEVEL, component: str = "") -> list[TestResult]:
    """The tests of the standardised innovations of a factor path drawn from the smoother, flagged below
    ``level`` and marked as tests on the path; ``component``: " of <name>" for one component of a
    k-dimensional state."""
    subject = f"factor innovations{component}"
    tests = (_ljung_box_tests(innovations, lags, subject, level)
             + _ljung_box_tests(innovations**2, lags, f"squared {subject}", level)
             + [TestResult("Durbin-Watson", subject, durbin_watson(innovations), None, None, level)])
    return [dataclasses.replace(t, factor_path=True) for t in tests]
