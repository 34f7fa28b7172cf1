"""The result of a fit: estimates, accuracy, diagnostics, smoothed factor; JSON and text forms."""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np

from smle import report_text as layout
from smle.models import model_title
from smle.errors import SmleInputError, load_saved

CAUTION = (
    "Model estimates are statistical output, not investment advice; users remain responsible "
    "for decisions taken under their own rules."
)

_ARRAYS = ("covariance", "smoothed_mean", "smoothed_lower", "smoothed_upper", "log_weights")
FORMAT = "smle.fit/1"


@dataclasses.dataclass
class FitResult:
    """Everything a fit produced.

    Attributes:
      model, model_options: the model's registry name and constructor options.
      param_names: parameter order.
      params, std_errors: estimates and standard errors by name (natural parameterisation;
        inverse Hessian of minus the log-likelihood, delta method).
      conf_int: intervals by name at ``level``, built on the unconstrained scale and mapped back
        (so they stay inside the admissible region) when each parameter has its own bijection;
        delta-method intervals when the model's bijection is joint.
      covariance: covariance matrix of the estimates (natural parameterisation).
      loglik, nse: the EIS log-likelihood at the estimates and its numerical standard error.
      n_obs, aic, bic: number of periods and information criteria (from ``loglik``).
      converged, message: the optimiser's verdict in words.
      iterations, n_evaluations, grad_norm, elapsed_seconds: optimiser facts (evaluations count
        value-and-gradient calls, including those of the Hessian).
      start: the start values used.
      eis: settings and diagnostics of the EIS estimator at the estimates.
      factor_name: what the latent state is (e.g. the log variance).
      smoothed_mean, smoothed_lower, smoothed_upper: posterior mean and 5%/95% quantiles of the
        latent state per period, from the weighted scoring draws: shape (T,), or (T, k) per
        component for a k-dimensional state (the JSON stores them as nested lists).
      log_weights: log importance weights at the estimates.
      simulation_std_errors, seed_estimates: with ``n_seeds > 1``, the spread of the estimates
        across independent random numbers and the estimates themselves.
      observations: the data the model was fitted to, shape (T,) or (T, n_series), or None
        (stored in the JSON so that a saved result can be diagnosed on its own).
      fixed: parameters held at given values in a restricted fit, by name (empty or None: none);
        their standard errors and intervals are NaN, their covariance rows zero.

    A model without a latent state is fitted by its closed-form likelihood: ``eis`` is then
    ``{"method": "closed form"}``, ``nse`` 0, the smoothed path is the model's
    ``factor_path`` (e.g. sqrt(h_t)), its band collapsed onto it, and ``log_weights`` empty.
      data_source: what was fitted, or None: ``file``, ``columns``, ``units`` (one per column,
        None when not stated), ``first`` and ``last`` date (None without dates), ``n_obs``.
      dates: the date of each period (ISO text), or None.
      zero_returns: how many returns are exactly zero (kept as observations), or None for a
        model whose first series is not a return.
    """

    model: str
    model_options: dict
    param_names: list
    params: dict
    std_errors: dict
    conf_int: dict
    level: float
    covariance: np.ndarray
    loglik: float
    nse: float
    n_obs: int
    aic: float
    bic: float
    converged: bool
    message: str
    iterations: int
    n_evaluations: int
    grad_norm: float
    elapsed_seconds: float
    start: dict
    eis: dict
    factor_name: str
    smoothed_mean: np.ndarray
    smoothed_lower: np.ndarray
    smoothed_upper: np.ndarray
    log_weights: np.ndarray
    simulation_std_errors: dict | None = None
    seed_estimates: list | None = None
    observations: np.ndarray | None = None
    fixed: dict | None = None
    data_source: dict | None = None
    dates: list | None = None
    zero_returns: int | None = None

    @property
    def loglik_bias_corrected(self) -> float:
        """``loglik + nse^2 / 2`` (Durbin and Koopman 1997, Biometrika 84)."""
        return self.loglik + 0.5 * self.nse**2

    # -- serialisation -------------------------------------------------------------------------
    def to_dict(self) -> dict:
        out = {"format": FORMAT}
        for field in dataclasses.fields(self):
            value = getattr(self, field.name)
            if field.name in _ARRAYS:
                value = np.asarray(value).tolist()
            elif field.name == "observations":
                value = None if value is None else np.asarray(value).tolist()
            elif field.name == "conf_int":
                value = {k: list(v) for k, v in value.items()}
            out[field.name] = value
        return out

    def to_json(self, path=None) -> str:
        """JSON text (floats written with their shortest exact representation); optionally saved."""
        text = json.dumps(self.to_dict(), indent=1, allow_nan=True)
        if path is not None:
            Path(path).write_text(text)
        return text

    @classmethod
    def from_dict(cls, data: dict) -> "FitResult":
        data = dict(data)
        if data.pop("format", None) != FORMAT:
            raise ValueError(f"not an smle fit result (expected format {FORMAT})")
        for name in _ARRAYS:
            data[name] = np.asarray(data[name], dtype=float)
        data["conf_int"] = {k: tuple(v) for k, v in data["conf_int"].items()}
        if data.get("observations") is not None:
            data["observations"] = np.asarray(data["observations"], dtype=float)
        if "loglik_uncorrected" in data.get("eis", {}):  # the name this entry had in results saved by earlier versions
            data["eis"] = {("value_uncorrected" if k == "loglik_uncorrected" else k): v for k, v in data["eis"].items()}
        return cls(**data)

    @classmethod
    def from_json(cls, text_or_path) -> "FitResult":
        """Read a result written by :meth:`to_json` (JSON text or a file path)."""
        return load_saved(cls.from_dict, text_or_path, f"a fit result written by FitResult.to_json (format {FORMAT})")

    # -- text ------------------------------------------------------------------------------------
    def summary(self) -> str:
        """A plain-text summary in smle's report layout (:mod:`smle.report_text`)."""
        return layout.render(
            layout.title("fit", f"model {model_title(self.model, self.model_options)}", f"{self.n_obs} periods",
                       f"converged: {'yes' if self.converged else 'no'}"),
            [_data_lines(self), self._estimate_block(), self._likelihood_block(), self._optimiser_block(),
             self._simulation_block()],
            CAUTION)

    def _estimate_block(self) -> list[str]:
        level = f"{int(round(self.level * 100))}% interval"
        extra = "; spread over seeds" if self.simulation_std_errors else ""
        rows = []
        fixed = self.fixed or {}
        for name in self.param_names:
            if name in fixed:
                rows.append(f"{name:<12}{self.params[name]:>12.5f}   (fixed)")
                continue
            lo, hi = self.conf_int[name]
            inside = f"{self.std_errors[name]:.5f}; {lo:.5f} to {hi:.5f}"
            if self.simulation_std_errors:
                inside += f"; {self.simulation_std_errors[name]:.5f}"
            rows.append(f"{name:<12}{self.params[name]:>12.5f}   ({inside})")
        return layout.block(f"Estimates (standard error; {level}{extra})", rows)

    @property
    def closed_form(self) -> bool:
        """Whether the likelihood was exact in closed form (a model without a latent state)."""
        return self.eis.get("method") == "closed form"

    @property
    def method(self) -> str:
        """How the likelihood was computed: "EIS", "exact" or "closed form"."""
        return self.eis.get("method", "EIS")

    @property
    def simulated(self) -> bool:
        """Whether the likelihood was simulated (EIS): False for the exact method and the closed form."""
        return self.method == "EIS"

    def _likelihood_block(self) -> list[str]:
        if self.closed_form:
            value = f"{self.loglik:.4f} (closed form: exact, no simulation error)"
        elif self.method == "exact":
            value = f"{self.loglik:.4f} (exact: {exact_engine_text(self.eis)})"
        else:
            value = f"{self.loglik:.4f} (NSE {self.nse:.4f}; bias-corrected {self.loglik_bias_corrected:.4f})"
        free = len(self.param_names) - len(self.fixed or {})
        counted = f"{free} free parameters" + (f", {len(self.fixed)} fixed" if self.fixed else "")
        return layout.block("Likelihood", [
            layout.field("log-likelihood", value),
            layout.field("information criteria", f"AIC {self.aic:.3f}, BIC {self.bic:.3f} ({counted})"),
        ])

    def _optimiser_block(self) -> list[str]:
        return layout.block("Optimiser", [
            self.message,
            f"{self.iterations} L-BFGS steps, {self.n_evaluations} evaluations, max|grad| {self.grad_norm:.1e}, "
            f"{self.elapsed_seconds:.2f} s",
        ])

    def _simulation_block(self) -> list[str]:
        eis = self.eis
        if not self.simulated:
            return []
        lines = [
            layout.field("draws", f"{eis['n_draws']}{' antithetic' if eis['antithetic'] else ''}, seed {eis['seed']}, "
                                f"{eis['iterations']} EIS iterations, smallest regression R^2 "
                                f"{eis['min_r_squared']:.3f}"),
            layout.field("effective sample size", f"{eis['ess']:.1f} of {eis['n_draws']} draws "
                                                f"({eis['ess'] / eis['n_draws']:.0%})"),
            *low_ess_warning(eis["ess"], eis["n_draws"], "draws"),
            *_control_lines(eis),
            *self._exact_reference_lines(),
        ]
        return layout.block("Simulation (EIS at the estimates)", lines)

    def _exact_reference_lines(self) -> list[str]:
        """The EIS fit measured against the exact likelihood (one-dimensional states)."""
        eis = self.eis
        if "exact_reference_error" in eis:
            return [layout.field("against the exact likelihood", f"not available: {eis['exact_reference_error']}")]
        if "exact_loglik_at_estimate" not in eis:
            return []
        gaps = {n: abs(self.params[n] - v) / self.std_errors[n] for n, v in eis["exact_estimates"].items()
                if n in self.std_errors and self.std_errors[n] > 0}
        worst = max(gaps, key=gaps.get) if gaps else None
        lines = [
            layout.field("against the exact likelihood",
                         f"exact {eis['exact_loglik_at_estimate']:.4f} at the estimate by the {eis['exact_engine']}: "
                         f"simulation error {eis['simulation_error']:+.4f} against a reported NSE of {self.nse:.4f}"),
            layout.field("exact maximum", f"{eis['exact_max_loglik']:.4f}, {eis['loss_against_exact']:.4f} above the "
                                          "exact value at the EIS estimate"
                         + (f"; estimates within {gaps[worst]:.2f} standard errors of it (largest: {worst})"
                            if worst else "")),
        ]
        if abs(eis["simulation_error"]) > 3 * max(self.nse, 1e-12):
            lines.append(layout.warning(f"the simulation error is {abs(eis['simulation_error']) / max(self.nse, 1e-12):.1f} "
                                        "times the reported NSE: the NSE understates the error; use the exact method "
                                        "or more draws"))
        return lines

    def __str__(self) -> str:
        return self.summary()


LOW_ESS_FRACTION = 0.20
"""An EIS effective sample size below this fraction of the draws is flagged in reports (common
practice, a rule of thumb: fewer than one draw in five then carries the estimate, as in 8 of 64)."""


def low_ess_warning(ess: float, n: int, unit: str, where: str = "", fraction: float = LOW_ESS_FRACTION) -> list[str]:
    """A warning line when ``ess`` is below ``fraction`` of ``n`` (none otherwise)."""
    if not ess < fraction * n:
        return []
    return [layout.warning(f"effective sample size {ess:.1f}{where} is below {fraction:.0%} of the {n} {unit} "
                           f"(common practice): the estimate rests on a few {unit}; use more {unit}")]
def exact_engine_text(facts: dict) -> str:
    """The exact method's engine and accuracy in words, from ``FitResult.eis`` entries."""
    if not facts.get("grid_size"):
        return "Kalman filter, no simulation error"
    return (f"grid filter, {facts['grid_size']} points, error bound {facts['error_bound']:.1e} against a coarser grid, "
            "no simulation error")


def _data_lines(result: FitResult) -> list[str]:
    """The summary's lines on what was fitted (file, columns, units, dates) and its zero returns."""
    lines = []
    source = result.data_source
    if source:
        columns = source.get("columns") or []
        units = source.get("units") or [None] * len(columns)
        parts = [f"{c} ({u})" if u else str(c) for c, u in zip(columns, units)]
        where = f"{source['file']}, " if source.get("file") else ""
        what = f"column{'s' if len(parts) > 1 else ''} {', '.join(parts)}" if parts else "unnamed series"
        span = f", {source['first']} to {source['last']}" if source.get("first") else ""
        lines.append(f"data: {where}{what}{span}, T = {result.n_obs}")
    if result.zero_returns:
        lines.append(f"{result.zero_returns} zero returns (market holidays?) kept as observations")
    return lines


def date_texts(index) -> list[str] | None:
    """ISO dates (with the time when some row has one) of a pandas DatetimeIndex, else None."""
    if not hasattr(index, "strftime") or not hasattr(index, "normalize"):
        return None
    daily = bool((index == index.normalize()).all())
    return list(index.strftime("%Y-%m-%d" if daily else "%Y-%m-%d %H:%M:%S"))


def describe_data(y, source=None, dates=None):
    """``(values, data_source, dates)`` for :func:`smle.fit`: a pandas Series or DataFrame gives
    its name(s) and, with a DatetimeIndex, its dates; ``source`` (a file name, or a mapping with
    the keys of ``FitResult.data_source``) and ``dates`` override them."""
    info = {}
    index = getattr(y, "index", None)
    if index is not None and hasattr(y, "to_numpy"):
        names = list(y.columns) if hasattr(y, "columns") else ([y.name] if y.name is not None else [])
        if names:
            info["columns"] = [str(n) for n in names]
        if dates is None:
            dates = date_texts(index)
        y = y.to_numpy(dtype=float)
    if isinstance(source, (str, Path)):
        info["file"] = str(source)
    elif source is not None:
        info.update(dict(source))
    if dates is not None:
        dates = [str(d) for d in dates]
        if len(dates) != np.shape(y)[0]:
            raise SmleInputError(f"dates has {len(dates)} entries for {np.shape(y)[0]} observations; "
                                 "accepted: one date per period")
        info.update(first=dates[0], last=dates[-1])
    return y, (info or None), dates


def count_zero_returns(model, y: np.ndarray) -> int | None:
    """Exactly-zero values of the first series when it is a return (None otherwise)."""
    if model.series_labels[0] != "return":
        return None
    first = y if y.ndim == 1 else y[:, 0]
    return int(np.count_nonzero(first == 0.0))


def _control_lines(eis: dict) -> list[str]:
    """The summary's line on control variates (none without them)."""
    if not eis.get("control_variates"):
        return []
    coefficients = ", ".join(f"{k} {v:.3f}" for k, v in eis.get("cv_coefficients", {}).items())
    return [layout.field(f"control variates {eis['control_variates']!r}",
                       f"coefficients {coefficients}; uncorrected log-likelihood {eis['value_uncorrected']:.4f}, "
                       f"NSE {eis['nse_uncorrected']:.4f}")]


def _equal(a, b) -> bool:
    """Exact equality of two results' contents (arrays and NaNs included); used by tests."""
    for field in dataclasses.fields(FitResult):
        x, y = getattr(a, field.name), getattr(b, field.name)
        if field.name == "observations" and (x is None or y is None):
            if (x is None) != (y is None):
                return False
        elif field.name in _ARRAYS or field.name == "observations":
            if not np.array_equal(np.asarray(x), np.asarray(y), equal_nan=True):
                return False
        elif isinstance(x, float) and isinstance(y, float) and math.isnan(x) and math.isnan(y):
            continue
        elif x != y:
            return False
    return True
