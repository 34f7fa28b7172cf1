"""The result of a fit: estimates, accuracy, diagnostics, smoothed factor; JSON and text forms."""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np

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
        text = str(text_or_path)
        if not text.lstrip().startswith("{"):
            text = Path(text_or_path).read_text()
        return cls.from_dict(json.loads(text))

    # -- text ------------------------------------------------------------------------------------
    def summary(self) -> str:
        """A plain-text summary in smle's own layout."""
        width = 74
        rule = "-" * width
        verdict = "yes" if self.converged else "NO"
        lines = [
            f"smle fit  |  model {self.model}  |  {self.n_obs} periods  |  converged: {verdict}",
            rule,
            f"{'parameter':<12}{'estimate':>12}{'std.err':>11}"
            + (f"{'sim.err':>10}" if self.simulation_std_errors else "")
            + f"   {int(round(self.level * 100))}% interval",
        ]
        for name in self.param_names:
            lo, hi = self.conf_int[name]
            row = f"{name:<12}{self.params[name]:>12.5f}{self.std_errors[name]:>11.5f}"
            if self.simulation_std_errors:
                row += f"{self.simulation_std_errors[name]:>10.5f}"
            row += f"   [{lo:.5f}, {hi:.5f}]"
            lines.append(row)
        eis = self.eis
        lines += [
            rule,
            f"log-likelihood {self.loglik:.4f}   NSE {self.nse:.4f}   bias-corrected {self.loglik_bias_corrected:.4f}",
            f"AIC {self.aic:.3f}   BIC {self.bic:.3f}",
            f"optimiser: {self.message}",
            f"  {self.iterations} L-BFGS steps, {self.n_evaluations} evaluations, max|grad| {self.grad_norm:.1e}, "
            f"{self.elapsed_seconds:.2f} s",
            f"EIS at the estimate: {eis['n_draws']} draws{' (antithetic)' if eis['antithetic'] else ''}, "
            f"seed {eis['seed']}, {eis['iterations']} iterations, ESS {eis['ess']:.1f}, "
            f"min R^2 {eis['min_r_squared']:.3f}",
            *_control_lines(eis),
            rule,
            CAUTION,
        ]
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()


def _control_lines(eis: dict) -> list[str]:
    """The summary's line on control variates (none without them)."""
    if not eis.get("control_variates"):
        return []
    coefficients = ", ".join(f"{k} {v:.3f}" for k, v in eis.get("cv_coefficients", {}).items())
    return [f"control variates {eis['control_variates']!r} ({coefficients}): uncorrected log-likelihood "
            f"{eis['value_uncorrected']:.4f}, NSE {eis['nse_uncorrected']:.4f}"]


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
