"""Comparing models fitted to the same data: :func:`compare`.

Each model (a name with options and held parameters, a :class:`ModelSpec`) is fitted by
:func:`smle.fit` to the same observations. The comparison reports per model the
log-likelihood and its simulation error (0 for a closed-form likelihood, the NSE for EIS), the
number of free parameters, AIC and BIC, and likelihood-ratio tests for the nested pairs it can
detect.

Nesting. Model A is nested in model B when A is B with some of B's parameters held at given
values: the same model and options with more parameters fixed (``garch`` with ``ar1`` fixed
in ``garch``), or a known embedding: ``garch`` with NIG innovations (unconditional variance
start) is ``garch-mix`` (ig link, no realized measure) at ``rho = 0`` exactly (Forsberg and
Bollerslev 2002). The statistic LR = 2 (log L_B - log L_A) is compared with chi-square(df), df
the number of restrictions (Wilks 1938, Annals of Mathematical Statistics 9). When the null
puts one restricted parameter on the boundary of B's parameter space, the law is the mixture
0.5 chi2(df - 1) + 0.5 chi2(df) (Self and Liang 1987, J. American Statistical Association 82;
chi2(0) is a point mass at 0). A limit at infinity (normal innovations as Student-t's nu ->
infinity) is not a restriction to a point of the parameter space: such pairs are named in
the notes and not tested.

Simulation error. With EIS likelihoods the LR statistic carries simulation error, standard
deviation about 2 sqrt(nse_A^2 + nse_B^2) (independent errors; common random numbers make it
smaller). A test is flagged when its statistic lies within two such standard deviations of
the critical value: more draws could change its conclusion.

Estimates and tests are statistical output, not advice (:data:`smle.results.CAUTION`).
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path
from typing import Mapping, NamedTuple, Sequence

from scipy import stats

from smle.engine.sampler import FIT_DRAWS
from smle.errors import SmleInputError, describe
from smle.fit import fit
from smle.models import Model, get_model
from smle.models.base import model_options
from smle.results import CAUTION, FitResult

SELF_LIANG = "Self and Liang (1987), J. American Statistical Association 82"
WILKS = "chi-square (Wilks 1938)"


@dataclasses.dataclass(frozen=True)
class ModelSpec:
    """One model of a comparison: a registered name, its options, parameters held fixed, a label."""

    name: str
    options: tuple = ()
    fixed: tuple = ()
    label: str = ""

    @classmethod
    def of(cls, item) -> "ModelSpec":
        """A spec from a name, a mapping ``{"model", "options", "fixed", "label"}`` or a spec."""
        if isinstance(item, ModelSpec):
            return item
        if isinstance(item, str):
            item = {"model": item}
        if not isinstance(item, Mapping) or "model" not in item:
            raise SmleInputError(f"models item {describe(item)} is not accepted; accepted: a model name, or a mapping "
                                 "with 'model' and optional 'options', 'fixed', 'label'")
        unknown = set(item) - {"model", "options", "fixed", "label"}
        if unknown:
            raise SmleInputError(f"models item has unknown key(s) {sorted(unknown)}; accepted: model, options, fixed, "
                                 "label")
        options = tuple(sorted(dict(item.get("options") or {}).items()))
        fixed = tuple(sorted((k, float(v)) for k, v in dict(item.get("fixed") or {}).items()))
        return cls(str(item["model"]), options, fixed, str(item.get("label") or ""))

    def model(self) -> Model:
        return get_model(self.name, **dict(self.options))

    def title(self) -> str:
        """The label, or the name with its options and fixed values."""
        if self.label:
            return self.label
        parts = [f"{k}={v}" for k, v in self.options] + [f"{k}={v:g}" for k, v in self.fixed]
        return self.name + (f" ({', '.join(parts)})" if parts else "")


class NestedTest(NamedTuple):
    """A likelihood-ratio test of a restricted model against a general one.

    Attributes:
      restricted, general: row numbers (1-based) in the comparison table.
      restrictions: the restrictions on the general model, ``name=value`` text.
      statistic: LR = 2 (log L_general - log L_restricted); df: number of restrictions.
      p_value: from ``reference``'s law; critical_value: its (1 - level) quantile.
      reference: "chi-square (Wilks 1938)" or the Self and Liang (1987) mixture.
      simulation_sd: about 2 sqrt(nse_r^2 + nse_g^2), the LR statistic's simulation error.
      warning: why the conclusion is not firm, or "".
    """

    restricted: int
    general: int
    restrictions: str
    statistic: float
    df: int
    p_value: float
    critical_value: float
    reference: str
    simulation_sd: float
    warning: str


def mixture_p_value(statistic: float, df: int) -> float:
    """P(X >= statistic) for X ~ 0.5 chi2(df - 1) + 0.5 chi2(df), chi2(0) a point mass at 0."""
    lower = (1.0 if statistic <= 0 else 0.0) if df == 1 else float(stats.chi2.sf(statistic, df - 1))
    return 0.5 * lower + 0.5 * float(stats.chi2.sf(statistic, df))


def mixture_critical_value(level: float, df: int) -> float:
    """The (1 - level) quantile of 0.5 chi2(df - 1) + 0.5 chi2(df) (level < 0.5)."""
    from scipy.optimize import brentq

    return float(brentq(lambda c: mixture_p_value(c, df) - level, 1e-12, 1e3))


# Embeddings between different models: (small name, small options) -> (big name, big options,
# the restrictions on the big model's parameters that give the small one).
def _embedding(small: Model, big: Model) -> dict | None:
    if small.name == big.name and model_options(small) == model_options(big):
        return {}
    if (small.name == "garch" and big.name == "garch-mix" and small.innovations == "nig"
            and small.variance_start == "unconditional" and big.link == "ig" and not big.realized):
        return {"rho": 0.0}
    return None


# Pairs nested only in a limit at infinity: (small, big) -> the limit, for the notes.
def _limit_at_infinity(small: Model, big: Model) -> str | None:
    if small.name == "garch" and big.name == "garch" and small.innovations == "normal" \
            and big.innovations == "t" and small.variance_start == big.variance_start:
        return "nu -> infinity"
    if small.name == "sv" and big.name == "sv-t":
        return "nu -> infinity"
    return None


def restrictions(small: ModelSpec, big: ModelSpec) -> dict | None:
    """The restrictions on ``big``'s parameters (beyond its own fixed ones) that give ``small``,
    or None when ``small`` is not ``big`` with parameters held (or is ``big`` itself)."""
    embedded = _embedding(small.model(), big.model())
    if embedded is None:
        return None
    held_small = {**dict(small.fixed), **embedded}
    held_big = dict(big.fixed)
    if any(name not in held_small or held_small[name] != value for name, value in held_big.items()):
        return None
    extra = {k: v for k, v in held_small.items() if k not in held_big}
    return extra or None


@dataclasses.dataclass
class Comparison:
    """The result of :func:`compare`: the fits, the table's rows, the tests and the notes."""

    specs: list
    fits: list
    tests: list
    notes: list
    n_obs: int
    level: float

    def rows(self) -> list[dict]:
        """One dict per model: label, method, log-likelihood, its error, free parameters, AIC, BIC."""
        out = []
        for spec, result in zip(self.specs, self.fits):
            out.append({"label": spec.title(), "model": spec.name, "options": dict(spec.options),
                        "fixed": dict(spec.fixed), "method": result.method,
                        "loglik": result.loglik, "loglik_error": result.nse if result.simulated else 0.0,
                        "free_parameters": len(result.param_names) - len(result.fixed or {}),
                        "aic": result.aic, "bic": result.bic, "converged": result.converged})
        return out

    def summary(self) -> str:
        from smle.decision.compare_report import summary_text

        return summary_text(self)

    def to_dict(self) -> dict:
        return {"format": "smle.compare/1", "n_obs": self.n_obs, "level": self.level, "models": self.rows(),
                "tests": [t._asdict() for t in self.tests], "notes": list(self.notes), "caution": CAUTION}

    def to_json(self, path=None) -> str:
        text = json.dumps(self.to_dict(), indent=1, allow_nan=True)
        if path is not None:
            Path(path).write_text(text)
        return text

    def figure(self, path=None):
        from smle.decision.compare_report import comparison_figure

        return comparison_figure(self, path)

    def __str__(self) -> str:
        return self.summary()


def nested_tests(specs: Sequence[ModelSpec], fits: Sequence[FitResult], level: float):
    """The likelihood-ratio tests of every nested pair, and notes on pairs not tested."""
    tests, notes = [], []
    for i, small in enumerate(specs):
        for j, big in enumerate(specs):
            if i == j:
                continue
            held = restrictions(small, big)
            if held is None:
                limit = _limit_at_infinity(small.model(), big.model())
                if limit and dict(small.fixed) == dict(big.fixed):
                    notes.append(f"model {i + 1} is model {j + 1} in the limit {limit}, on the edge of the parameter "
                                 "space at infinity: the chi-square law of the LR statistic does not apply, not "
                                 "tested (compare them by AIC and BIC)")
                continue
            tests.append(_lr_test(i, j, held, big.model(), fits[i], fits[j], level))
    return tests, notes


def _lr_test(i, j, held, big_model, small_fit, big_fit, level) -> NestedTest:
    constraints = big_model.constraints()
    boundary = [n for n, v in held.items() if v in (constraints[n].lower, constraints[n].upper)]
    df = len(held)
    raw = 2.0 * (big_fit.loglik - small_fit.loglik)
    statistic = max(0.0, raw)
    if len(boundary) == 1:
        p_value, critical, reference = mixture_p_value(statistic, df), mixture_critical_value(level, df), \
            f"0.5 chi2({df - 1}) + 0.5 chi2({df}) mixture, {SELF_LIANG}"
    else:
        p_value, critical = float(stats.chi2.sf(statistic, df)), float(stats.chi2.ppf(1 - level, df))
        reference = WILKS if not boundary else f"{WILKS}; {len(boundary)} parameters on the boundary: conservative"
    sd = 2.0 * math.hypot(small_fit.nse, big_fit.nse)
    warning = ""
    if raw < -(2.0 * sd + 1e-4):
        warning = (f"the restricted model's log-likelihood exceeds the general one's by {-raw / 2:.4f}: the general "
                   "fit did not reach its maximum (try other start values)")
    elif sd > 0 and abs(statistic - critical) < 2.0 * sd:
        warning = (f"the simulation error of LR (sd about {sd:.2f}) is large against its distance "
                   f"{abs(statistic - critical):.2f} from the critical value {critical:.2f}: more draws could change "
                   "the conclusion")
    text = ", ".join(f"{n}={v:g}" for n, v in held.items())
    return NestedTest(i + 1, j + 1, text, statistic, df, p_value, critical, reference, sd, warning)


def compare(models, y, n_draws: int = FIT_DRAWS, seed: int = 0, level: float = 0.05, **fit_options) -> Comparison:
    """Fit several models to the same observations and compare them.

    Args:
      models: a sequence of at least two model specifications: names (``"garch"``), mappings
        ``{"model": "garch", "options": {"innovations": "t"}, "fixed": {"ar1": 0.0},
        "label": "..."}`` or :class:`ModelSpec`.
      y: the observations every model describes, shape (T,) or (T, n_series).
      n_draws, seed: EIS settings of the simulated likelihoods (not used by closed forms).
      level: significance level of the likelihood-ratio tests.
      fit_options: passed to :func:`smle.fit` for every model (e.g. ``control_variates``).

    Returns:
      A :class:`Comparison` (``summary()``, ``to_json()``, ``figure()``).
    """
    if isinstance(models, (str, Mapping)) or not isinstance(models, Sequence) or len(models) < 2:
        raise SmleInputError(f"models = {describe(models)} is not accepted; accepted: a list of at least two model "
                             "specifications (names, or mappings with 'model', 'options', 'fixed')")
    if not (isinstance(level, float) and 0.0 < level < 0.5):
        raise SmleInputError(f"level = {describe(level)} is not accepted; accepted: a significance level in (0, 0.5)")
    specs = [ModelSpec.of(item) for item in models]
    series = {spec.model().n_series for spec in specs}
    if len(series) > 1:
        raise SmleInputError("the models describe different numbers of observed series "
                             f"({', '.join(f'{s.title()}: {s.model().n_series}' for s in specs)}); accepted: models "
                             "of the same observations")
    fits = [fit(spec.model(), y, n_draws=n_draws, seed=seed, fixed=dict(spec.fixed) or None, **fit_options)
            for spec in specs]
    tests, notes = nested_tests(specs, fits, level)
    notes += [f"model {k + 1} did not converge: {f.message}" for k, f in enumerate(fits) if not f.converged]
    return Comparison(specs, fits, tests, notes, int(fits[0].n_obs), level)
