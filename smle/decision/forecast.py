"""Forecasts from a fit: h-step predictive distributions of returns and of the variance.

:func:`forecast` starts from the law of the latent state at the end of the sample given all the
data, p(x_T | y_1..y_T), and simulates ``n_paths`` futures with the model's own dynamics (its
``simulate_ahead`` hook):

* one-dimensional state, linear Gaussian model (``ar1-noise``, ``local-level``): x_T is drawn
  from its Kalman-filtered law N(a_T, P_T) (Kalman 1960; Durbin and Koopman 2012, sec. 4.3);
* one-dimensional state otherwise: x_T is drawn from the filtered masses on the exact grid of
  :mod:`smle.exact_likelihood` (Kitagawa 1987, JASA 82). Draws are the grid points themselves:
  an expectation over them is the grid's quadrature, accurate to its geometric order, and the
  first transition makes x_{T+1} continuous. Where the transition uses the data (``sv-leverage``,
  Yu 2005) the filter runs with that per-period transition, and the first step ahead uses y_T;
* no latent state (``garch``): the GARCH recursion continues from the last period's variance.

Every path then runs T+1..T+H forward: the state's AR(1) transition, the GARCH recursion from
its end-of-sample value where the model has one, and the observation equation. For each step
k = 1..H the result gives, for three quantities:

* ``return``: r_{T+k} (the first observed series, in the data's units);
* ``cumulative return``: r_{T+1} + ... + r_{T+k} (a k-period holding return in log terms);
* ``variance``: the variance of r_{T+k} about its conditional mean given the period's state:
  exp(x_t) in the sv family, h_t for ``garch``, h_t (gamma^2 (W_t - 1)^2 + W_t) / c^2 for
  ``garch-mix`` (mean h_t over W_t), sigma_eps^2 for the linear Gaussian models;

the mean, standard deviation and quantiles, and for the two return quantities the value at risk
VaR_p = -q_p (the loss exceeded with probability p, positive when q_p < 0) and the expected
shortfall ES_p = -E[r | r <= q_p], at each level p. Monte Carlo standard errors: sd / sqrt(n)
for means; for VaR the distribution-free order-statistic interval (the order statistics
n p +- 1.96 sqrt(n p (1 - p)) bracket q_p with probability about 95%; David and Nagaraja 2003,
Order Statistics, sec. 7.1, recalled from memory), its half-width / 1.96; for ES the asymptotic variance
(Var(r | r <= q_p) + (1 - p) (q_p - E[r | r <= q_p])^2) / (n p) (Chen 2008, J. Financial
Econometrics 6; recalled from memory).

Parameters are taken as known (the estimates) unless ``parameter_draws`` = N > 0: then N parameter
vectors are drawn from the estimates' asymptotic normal law on the fit's unconstrained scale
(:mod:`smle.decision.parameter_draws`) and the paths are pooled over them (about n_paths / N
each), so the bands include the parameter error. The paths of one draw share its parameters:
the means' errors are then cluster-robust (:func:`~smle.decision.parameter_draws.cluster_mean_se`),
while the VaR and ES errors still treat the pooled paths as independent, which understates them.
Forecasts are statistical output, not advice (:data:`smle.results.CAUTION`).
"""

from __future__ import annotations

import dataclasses
import functools
import json
import math
import warnings
from pathlib import Path

import jax
import jax.numpy as jnp
import numpy as np

from smle.decision.parameter_draws import (check_parameter_draws, cluster_mean_se, draw_sizes, parameter_sample,
                                           sub_seed)
from smle.decision.report_files import JsonReport
from smle.errors import SmleInputError, describe
from smle.models import Model, get_model, model_names, saved_model
from smle.models.base import model_options
from smle.results import CAUTION, FitResult
from smle.validation import check_integer, check_observations, checked_params, jax_params

FORMAT = "smle.forecast/1"
FAN_PROBABILITIES = (0.05, 0.25, 0.5, 0.75, 0.95)
QUANTITIES = ("return", "cumulative return", "variance")
MAX_HORIZON = 1000
MIN_PATHS = 100
HISTORY = 250  # observed periods kept for the fan chart


@dataclasses.dataclass
class Forecast(JsonReport):
    """The predictive distributions of :func:`forecast`.

    Attributes:
      model, model_options, params: the fitted model and the parameters used (known values).
      n_obs, last_date: periods of the data the forecast starts after, and the last one's date.
      horizon, levels, probabilities: steps ahead, VaR/ES levels, the quantiles given.
      n_paths, seed: Monte Carlo paths and the seed every random result is a function of.
      start: how the state at T was drawn (in words).
      stats: quantity -> {"mean", "sd", "mean_se" (H,); "quantiles" (len(probabilities), H);
        for the return quantities also "var", "var_se", "es", "es_se" (len(levels), H)}.
      history: the last observed values of the first series (for the figure).
      paths: the simulated paths, quantity -> (H, n_paths) (kept in memory, not in the JSON).
      parameter_draws: 0 (parameters taken as known) or the number N of parameter vectors the
        paths were pooled over (about n_paths / N paths each).
      parameter_sample: those N vectors, natural parameters by name (in memory, not in the JSON).
      parameter_note: "" or a warning that the draws' normal law is wide for some parameter.

    ``to_json(path=None)`` writes all but the paths and the parameter sample.
    """

    model: str
    model_options: dict
    params: dict
    n_obs: int
    last_date: str | None
    horizon: int
    levels: tuple
    probabilities: tuple
    n_paths: int
    seed: int
    start: str
    stats: dict
    history: np.ndarray
    paths: dict | None = dataclasses.field(default=None, repr=False)
    parameter_draws: int = 0
    parameter_sample: list | None = dataclasses.field(default=None, repr=False)
    parameter_note: str = ""

    def value_at_risk(self, level: float, quantity: str = "return") -> np.ndarray:
        """VaR at ``level`` for each step, shape (H,)."""
        return self.stats[quantity]["var"][self._level_index(level)]

    def expected_shortfall(self, level: float, quantity: str = "return") -> np.ndarray:
        """ES at ``level`` for each step, shape (H,)."""
        return self.stats[quantity]["es"][self._level_index(level)]

    def _level_index(self, level) -> int:
        matches = [i for i, p in enumerate(self.levels) if math.isclose(p, level)]
        if not matches:
            raise SmleInputError(f"level = {describe(level)} was not forecast; accepted: one of {self.levels}")
        return matches[0]

    def to_frame(self):
        """A pandas DataFrame indexed by (quantity, step): mean, sd, mean_se, q_<p>, and VaR_<p>,
        VaR_<p>_se, ES_<p>, ES_<p>_se (NaN for the variance)."""
        import pandas as pd

        frames = []
        for quantity in QUANTITIES:
            part = self.stats[quantity]
            columns = {"mean": part["mean"], "sd": part["sd"], "mean_se": part["mean_se"]}
            columns.update({f"q_{p:g}": part["quantiles"][i] for i, p in enumerate(self.probabilities)})
            for i, p in enumerate(self.levels):
                for label, key in (("VaR_{}", "var"), ("VaR_{}_se", "var_se"), ("ES_{}", "es"), ("ES_{}_se", "es_se")):
                    columns[label.format(f"{p:g}")] = part[key][i] if key in part else np.full(self.horizon, np.nan)
            index = pd.MultiIndex.from_product([[quantity], range(1, self.horizon + 1)], names=["quantity", "step"])
            frames.append(pd.DataFrame(columns, index=index))
        return pd.concat(frames)

    def to_dict(self) -> dict:
        out = {"format": FORMAT}
        for field in dataclasses.fields(self):
            if field.name in ("paths", "parameter_sample"):
                continue
            value = getattr(self, field.name)
            if field.name == "stats":
                value = {q: {k: np.asarray(v).tolist() for k, v in part.items()} for q, part in value.items()}
            elif field.name == "history":
                value = np.asarray(value).tolist()
            elif isinstance(value, tuple):
                value = list(value)
            out[field.name] = value
        out["caution"] = CAUTION
        return out

    @classmethod
    def from_json(cls, text_or_path) -> "Forecast":
        """Read a forecast written by :meth:`to_json` (JSON text or a file path)."""
        text = str(text_or_path)
        if not text.lstrip().startswith("{"):
            text = Path(text_or_path).read_text()
        data = json.loads(text)
        if data.pop("format", None) != FORMAT:
            raise ValueError(f"not an smle forecast (expected format {FORMAT})")
        data.pop("caution", None)
        data["stats"] = {q: {k: np.asarray(v, float) for k, v in part.items()} for q, part in data["stats"].items()}
        data["history"] = np.asarray(data["history"], float)
        data["levels"], data["probabilities"] = tuple(data["levels"]), tuple(data["probabilities"])
        return cls(**data)

    def summary(self) -> str:
        from smle.decision.forecast_report import summary_text

        return summary_text(self)

    def figure(self, path=None):
        """The fan chart (matplotlib figure; saved to ``path`` if given)."""
        from smle.decision.forecast_report import fan_chart

        return fan_chart(self, path)


# ---------------------------------------------------------------------------------------------
# statistics of simulated paths


def sorted_quantiles(ordered: np.ndarray, probabilities) -> np.ndarray:
    """Quantiles (len(probabilities), H) of rows already sorted, (H, n): numpy's default (linear)
    rule, x_(k) + (h - k) (x_(k+1) - x_(k)) with h = (n - 1) p, k = floor(h), without sorting again."""
    n = ordered.shape[1]
    h = (n - 1) * np.asarray(probabilities, float)
    low = np.minimum(np.floor(h).astype(int), n - 2)
    weight = h - low
    return ordered[:, low].T + weight[:, None] * (ordered[:, low + 1].T - ordered[:, low].T)


def path_statistics(paths: np.ndarray, probabilities, levels, tails: bool) -> dict:
    """Mean, sd, quantiles (and VaR/ES with their Monte Carlo errors when ``tails``) of paths
    (H, n) per step; see the module docstring for the definitions."""
    paths = np.asarray(paths, float)
    n = paths.shape[1]
    ordered = np.sort(paths, axis=1)
    out = {"mean": paths.mean(axis=1), "sd": paths.std(axis=1, ddof=1)}
    out["mean_se"] = out["sd"] / math.sqrt(n)
    out["quantiles"] = sorted_quantiles(ordered, probabilities)
    if not tails:
        return out
    var, var_se, es, es_se = (np.empty((len(levels), paths.shape[0])) for _ in range(4))
    for i, p in enumerate(levels):
        q = sorted_quantiles(ordered, [p])[0]
        spread = 1.96 * math.sqrt(n * p * (1.0 - p))
        low, high = max(int(math.floor(n * p - spread)), 0), min(int(math.ceil(n * p + spread)), n - 1)
        tail = ordered[:, :max(int(math.ceil(n * p)), 1)]
        tail_mean = tail.mean(axis=1)
        tail_var = tail.var(axis=1, ddof=1) if tail.shape[1] > 1 else np.zeros(paths.shape[0])
        var[i], var_se[i] = -q, (ordered[:, high] - ordered[:, low]) / (2.0 * 1.96)
        es[i] = -tail_mean
        es_se[i] = np.sqrt((tail_var + (1.0 - p) * (q - tail_mean) ** 2) / (n * p))
    out.update(var=var, var_se=var_se, es=es, es_se=es_se)
    return out


# ---------------------------------------------------------------------------------------------
# simulation


def _simulates_ahead(model: Model) -> bool:
    """Whether ``model`` has a ``simulate_ahead`` hook of its own kind: a model whose transition
    uses the data (leverage) needs one written for that transition, not one it inherits."""
    if model.transition_uses_data:
        return any("simulate_ahead" in vars(c) for c in type(model).__mro__
                   if c is not Model and issubclass(c, Model) and getattr(c, "transition_uses_data", False))
    return type(model).simulate_ahead is not Model.simulate_ahead


def forecast_models() -> list[str]:
    """Registered models that simulate beyond the data (define ``simulate_ahead``)."""
    return [n for n in model_names() if get_model(n).state_dim <= 1 and _simulates_ahead(get_model(n))]


def check_forecast_model(model: Model) -> None:
    """Raise :class:`SmleInputError` unless ``model`` can be forecast (k <= 1 and the hook)."""
    if model.state_dim > 1:
        raise SmleInputError(f"forecasts need a one-dimensional latent state (or none): model '{model.name}' has a "
                             f"{model.state_dim}-dimensional state; accepted models: {', '.join(forecast_models())}")
    if not _simulates_ahead(model):
        raise SmleInputError(f"model '{model.name}' does not simulate beyond the data; accepted models: "
                             f"{', '.join(forecast_models())}")


def end_state_draws(model: Model, params: dict, y, n_paths: int, key, run=None, row: int = -1):
    """``(draws, how)``: n_paths draws of x_T from p(x_T | y_1..y_T) (zeros without a latent state)
    and a sentence saying how they were drawn. ``run``: the exact filter's run over ``y`` if already
    computed; ``row``: the period whose filtered law is drawn from (-1: the last; -2 when ``y``
    extends one period beyond the forecast origin, as in a backtest)."""
    if model.state_dim == 0:
        return jnp.zeros(n_paths), "no latent state: the GARCH recursion continues from the last period's variance"
    from smle.engine.exact_smoothing import predicted_masses
    from smle.exact_likelihood import exact_run, log_g_on, transition_of

    run = exact_run(model, params, y) if run is None else run
    mean, sd = float(run.filtered_mean[row]), float(run.filtered_sd[row])
    if run.spec is None:
        draws = mean + sd * jax.random.normal(key, (n_paths,))
        return draws, f"x_T drawn from its Kalman-filtered law N({mean:.5g}, {sd:.5g}^2)"
    moves = transition_of(model, params, y)  # a transition that uses the data (leverage), or None
    _, filtered = predicted_masses(model.latent(params), log_g_on(model, params, y, run.spec), run.spec,
                                   None if moves is None else moves(run.spec.points()))
    return _grid_draws(run.spec.points(), filtered[row], key, n_paths), (
        f"x_T drawn from its filtered law on the exact grid ({run.spec.size} points; mean {mean:.5g}, sd {sd:.5g})")


@functools.partial(jax.jit, static_argnames="n_paths")
def _grid_draws(points, masses, key, n_paths):
    """n_paths grid points drawn with probabilities proportional to the masses (compiled: eager
    JAX operations cost a dispatch each)."""
    masses = jnp.maximum(masses, 0.0)
    return points[jax.random.choice(key, points.shape[0], (n_paths,), p=masses / jnp.sum(masses))]


@functools.lru_cache(maxsize=None)
def _ahead(model: Model, horizon: int):
    """The model's ``simulate_ahead`` compiled for one horizon (and per data and path shape)."""
    return jax.jit(lambda params, y, x_last, key: model.simulate_ahead(params, y, x_last, horizon, key))


def simulate_paths(model: Model, params: dict, y, horizon: int, n_paths: int, seed: int,
                   filtered=None) -> tuple[dict, str]:
    """``(paths, how)``: simulated paths, quantity -> (horizon, n_paths) array, from checked
    parameters (JAX scalars by name) and observations ``y``; ``how`` describes the start.
    ``filtered``: ``(data, run, row)`` for :func:`end_state_draws` when the filter has already run
    (default: the filter runs on ``y``)."""
    key = jax.random.PRNGKey(seed)
    state_key, path_key = jax.random.split(key)
    y = jnp.asarray(y, float)
    data, run, row = filtered if filtered is not None else (y, None, -1)
    x_last, how = end_state_draws(model, params, jnp.asarray(data, float), n_paths, state_key, run, row)
    returns, variance, _ = _ahead(model, horizon)(params, y, x_last, path_key)
    returns = np.asarray(returns)
    return {"return": returns, "cumulative return": np.cumsum(returns, axis=0),
            "variance": np.asarray(variance)}, how


def pooled_paths(model: Model, sample: list, y, horizon: int, n_paths: int, seed: int) -> tuple[dict, str]:
    """:func:`simulate_paths` for each parameter vector of ``sample`` (about n_paths / N paths each,
    draw i with seed :func:`sub_seed` (seed, 1, i)), pooled: ``(paths, how)``."""
    parts, how = [], ""
    for i, (params, size) in enumerate(zip(sample, draw_sizes(n_paths, len(sample)))):
        part, how_i = simulate_paths(model, jax_params(params), y, horizon, size, sub_seed(seed, 1, i))
        parts.append(part)
        how = how or how_i
    paths = {q: np.concatenate([part[q] for part in parts], axis=1) for q in QUANTITIES}
    return paths, f"{how} (at the first of {len(sample)} parameter draws; the same way at each)"


def check_levels(levels) -> tuple:
    try:
        values = tuple(float(p) for p in levels)
    except (TypeError, ValueError):
        values = ()
    if not values or not all(0.0 < p < 0.5 for p in values):
        raise SmleInputError(f"levels = {describe(levels)} is not accepted; accepted: one or more tail probabilities "
                             "in (0, 0.5), e.g. (0.01, 0.05)")
    return tuple(sorted(set(values)))


def forecast(result: FitResult, horizon: int, levels=(0.01, 0.05), n_paths: int = 20000, seed: int = 0,
             y=None, parameter_draws: int = 0) -> Forecast:
    """h-step predictive distributions of returns and of the variance after the end of a fit's data.

    Args:
      result: a :class:`~smle.results.FitResult` (its model, options and estimates).
      horizon: steps ahead H (1 to 1000).
      levels: tail probabilities p of the value at risk and expected shortfall.
      n_paths: simulated futures (at least 100); Monte Carlo errors fall as 1 / sqrt(n_paths).
      seed: every random result is a function of it.
      y: the observations to start from (default: those stored in ``result``); the same model's
        data, possibly extended by later periods.
      parameter_draws: 0 (default): the estimates are taken as known. N >= 2: N parameter
        vectors drawn from the estimates' asymptotic normal law on the fit's unconstrained scale
        (Krinsky and Robb 1986; :mod:`smle.decision.parameter_draws`), the paths pooled over
        them, so that the bands include the parameter error; needs the fit's covariance.

    Returns:
      A :class:`Forecast` (``summary()``, ``to_frame()``, ``to_json()``, ``figure()``).

    Raises:
      SmleInputError: a model with a k-dimensional state (k > 1) or without ``simulate_ahead``,
        or bad arguments.
    """
    if not isinstance(result, FitResult):
        raise SmleInputError(f"result = {describe(result)} is not accepted; accepted: a FitResult (smle.fit, or "
                             "FitResult.from_json of a saved fit)")
    if y is None:
        if result.observations is None:
            raise SmleInputError("y = None and the fit result stores no observations; pass the observations to "
                                 "forecast from")
        y = result.observations
    same_data = result.dates is not None and len(result.dates) == np.shape(y)[0]
    model = saved_model(result.model, result.model_options)
    n_paths = check_integer("n_paths", n_paths, MIN_PATHS)
    sample, note = None, ""
    if check_parameter_draws(parameter_draws, n_paths):
        check_forecast_model(model)
        sample, note = parameter_sample(model, result.params, result.covariance, result.fixed, parameter_draws,
                                        check_integer("seed", seed, 0))
        if note:
            warnings.warn(f"parameter_draws: {note}", UserWarning, stacklevel=2)
    outcome = forecast_at(model, result.params, y, horizon, levels=levels, n_paths=n_paths, seed=seed,
                          last_date=result.dates[-1] if same_data else None, parameter_sample=sample)
    return dataclasses.replace(outcome, parameter_note=note) if note else outcome


def forecast_at(model, params, y, horizon: int, levels=(0.01, 0.05), n_paths: int = 20000, seed: int = 0,
                last_date: str | None = None, parameter_sample: list | None = None) -> Forecast:
    """:func:`forecast` for a model (name or instance) at given parameters (a mapping by name) after
    observations ``y``; ``last_date`` labels the last period; ``parameter_sample``: parameter
    vectors to pool the paths over (None: ``params`` taken as known). Used by backtests and tests."""
    model = get_model(model)
    check_forecast_model(model)
    horizon = check_integer("horizon", horizon, 1)
    if horizon > MAX_HORIZON:
        raise SmleInputError(f"horizon = {horizon} is not accepted; accepted: an integer from 1 to {MAX_HORIZON}")
    n_paths = check_integer("n_paths", n_paths, MIN_PATHS)
    seed = check_integer("seed", seed, 0)
    levels = check_levels(levels)
    checked = checked_params(model, params)
    y = check_observations(model, y)
    if parameter_sample:
        sample = [checked_params(model, draw) for draw in parameter_sample]
        paths, how = pooled_paths(model, sample, y, horizon, n_paths, seed)
    else:
        paths, how = simulate_paths(model, jax_params(checked), y, horizon, n_paths, seed)
    probabilities = tuple(sorted({round(p, 12) for p in (*FAN_PROBABILITIES, *levels, *(1.0 - p for p in levels))}))
    stats = {q: path_statistics(paths[q], probabilities, levels, tails=q != "variance") for q in QUANTITIES}
    if parameter_sample:
        for q in QUANTITIES:
            stats[q]["mean_se"] = cluster_mean_se(paths[q], draw_sizes(n_paths, len(parameter_sample)))
    first = y if y.ndim == 1 else y[:, 0]
    return Forecast(model.name, model_options(model), dict(checked), int(y.shape[0]), last_date, horizon, levels,
                    probabilities, n_paths, seed, how, stats, np.asarray(first[-HISTORY:], float), paths,
                    len(parameter_sample or ()), [dict(d) for d in parameter_sample] if parameter_sample else None)
