"""Study definitions: designs, estimator settings, the master seed; from TOML or Python.

A study is a list of :class:`Design` (model, true parameters, sample length, replications,
:class:`Estimator` settings) and a master seed. Replication ``r`` of design ``d`` draws its
data and its common random numbers from ``SeedSequence([master_seed, design_key(d), r])``
alone (:func:`replication_seeds`), so any row can be recomputed on its own and no result
depends on the order or place in which replications run. The design key is derived from the
design's *name* (not its position), so designs may be reordered or added to a file without
changing the numbers of the others. A design with ``data_from`` takes its data seeds from
the design it names (the same simulated series, replication by replication) and keeps its own
estimator seeds: two estimators measured on identical data.

Study file format
=================

A study file is TOML with four tables; ``smle study example PATH`` writes a commented one.
Unknown keys are refused with the list of accepted ones.

[study]
  master_seed   integer >= 0, required. Root of every replication's seeds.
  name          string, default "study". Label of tables and figures.
  description   string, default "". Free text.

[outputs]       (optional; relative paths are relative to the study file)
  store         path of the SQLite store. No default: without it, give --store.
  folder        folder for summary.csv, summary.md and the figures.
                Default: "<store name>-summary" beside the store.

[defaults]      (optional) any design key except name; applied to every [[design]],
                which may override it. A params table here is merged key by key.

[[design]]      one table per cell of the study, at least one:
  name          string, required, unique. Part of every replication's seed: renaming
                a design changes its numbers; reordering designs does not.
  model         string, required: a model name (smle.model_names(): sv, sv-t,
                ar1-noise, realized-sv, garch-mix, local-level).
  params        table, required: the true parameters, e.g. { mu = -7.36, phi = 0.95,
                sigma_eta = 0.26 } for sv; every parameter of the model.
  n_periods     integer >= 2, required. T, the length of each simulated series.
  replications  integer >= 1, required. May grow later; the store keeps what is done.
  model_options table, default {}: keyword arguments of the model (e.g. garch-mix link).
  data_from     string, default none: the name of another design of the study whose
                simulated series this design estimates (replication r of both sees the
                same data; the estimator's own seeds stay this design's). Both need the
                same model, model_options, params and n_periods; the named design may not
                itself have data_from. With one design "exact" and the other "eis", the
                summary measures the simulation part of the EIS estimator's error.
  Estimator settings (passed to smle.fit):
  n_draws       integer >= 4, even with antithetic draws; default 64.
                EIS draws per set.
  antithetic    boolean, default true. Antithetic EIS draws.
  n_seeds       integer >= 1, default 1. Refits with independent EIS seeds for the
                simulation standard errors (1: none).
  seed_offset   integer >= 0, default 0. Added to each replication's EIS seed: new
                common random numbers, the same simulated data.
  start         "data" (default: the model's start values from the data) or "truth".
  max_steps     integer >= 1, default 200. Optimiser steps.
  gtol          number > 0, default 1e-6. Gradient tolerance of the optimiser.
  tol           number > 0, default 1e-8. EIS fixed-point tolerance.
  max_iter      integer >= 1, default 100. EIS fixed-point iterations.
  level         number in [0.5, 1), default 0.95. Confidence level of the intervals
                whose coverage the summary reports.
  method        "eis" (default: a study measures the simulated estimator), "exact" (the
                exact likelihood of a one-dimensional state: exact maximum likelihood, the
                reference the simulated estimator is measured against) or "auto".
                The same data fitted both ways: two designs joined by data_from.

A design's numbers depend on everything above except replications; changing any of it
for a design that already has stored results is refused (rename the design or use a new
store). Example::

    [study]
    name = "pilot"
    master_seed = 2024

    [outputs]
    store = "pilot.sqlite"
    folder = "pilot-summary"

    [defaults]
    model = "sv"
    params = { mu = -7.36, phi = 0.95, sigma_eta = 0.26 }
    replications = 100
    n_draws = 32

    [[design]]
    name = "T=500"
    n_periods = 500

    [[design]]
    name = "T=2000"
    n_periods = 2000

Run it with ``smle study run pilot.toml``; see ``smle study --help``.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import tomllib
from pathlib import Path
from typing import Mapping

import numpy as np

from smle.engine.sampler import FIT_DRAWS, FIT_MAX_ITER, FIT_TOL
from smle.errors import SmleInputError
from smle.study.checks import check_design, check_study

__all__ = ["Design", "Estimator", "Study", "canonical_json", "check_design", "check_study", "design_key",
           "format_text", "load_study", "replication_seeds", "study_from_mapping"]


@dataclasses.dataclass(frozen=True)
class Estimator:
    """Estimator settings of a design (passed to :func:`smle.fit`).

    Attributes:
      n_draws: EIS draws per set.
      antithetic: antithetic EIS draws.
      n_seeds: independent refits per replication for simulation standard errors (1: none).
      seed_offset: added to every replication's derived EIS seed; changes the common random
        numbers of the estimator and leaves the simulated data alone.
      start: ``"data"`` (the model's start values from the data) or ``"truth"``.
      max_steps, gtol, tol, max_iter: optimiser and EIS settings, as in :func:`smle.fit`.
      level: confidence level of the reported intervals.
      method: the likelihood method of :func:`smle.fit`: "eis" (default), "exact" or "auto".
    """

    n_draws: int = FIT_DRAWS
    antithetic: bool = True
    n_seeds: int = 1
    seed_offset: int = 0
    start: str = "data"
    max_steps: int = 200
    gtol: float = 1e-6
    tol: float = FIT_TOL
    max_iter: int = FIT_MAX_ITER
    level: float = 0.95
    method: str = "eis"


def _estimator_identity(estimator: Estimator) -> dict:
    """The estimator's settings as stored; ``method`` only when not "eis", so that stores written
    before the method existed (all EIS) keep their identity."""
    settings = dataclasses.asdict(estimator)
    if settings["method"] == "eis":
        del settings["method"]
    return settings


@dataclasses.dataclass(frozen=True)
class Design:
    """One cell of a study: data from ``model`` at ``params``, ``n_periods`` long, replicated.

    Attributes:
      name: unique within the study; part of every replication's seed.
      model: registered model name; ``model_options`` go to its constructor.
      params: the true parameters (natural parameterisation).
      n_periods: T, the length of each simulated series.
      replications: how many series to simulate and estimate.
      estimator: :class:`Estimator` settings.
      data_from: name of another design of the study whose simulated data this design uses
        (same model, options, parameters and length); ``None``: its own.
    """

    name: str
    model: str
    params: Mapping[str, float]
    n_periods: int
    replications: int
    estimator: Estimator = Estimator()
    model_options: Mapping[str, object] = dataclasses.field(default_factory=dict)
    data_from: str | None = None

    def identity(self) -> dict:
        """Everything that determines the numbers of a replication (all but the count);
        ``data_from`` only when set, so that stores written before it existed keep their identity."""
        identity = {
            "name": self.name,
            "model": self.model,
            "model_options": dict(self.model_options),
            "params": dict(self.params),
            "n_periods": self.n_periods,
            "estimator": _estimator_identity(self.estimator),
        }
        if self.data_from is not None:
            identity["data_from"] = self.data_from
        return identity

    def to_dict(self) -> dict:
        return {**self.identity(), "replications": self.replications}

    @classmethod
    def from_dict(cls, data: Mapping) -> "Design":
        data = dict(data)
        data["estimator"] = Estimator(**data.get("estimator", {}))
        return cls(**data)


@dataclasses.dataclass(frozen=True)
class Study:
    """A Monte Carlo study: designs, a master seed, where results go.

    Attributes:
      name: a label for tables and figures.
      master_seed: non-negative integer at the root of every replication's seeds.
      designs: the cells, in reporting order.
      store: path of the SQLite store (``None``: give one to :func:`smle.study.run_study`).
      output: folder for summary tables and figures (``None``: beside the store).
      description: free text.
    """

    name: str
    master_seed: int
    designs: tuple
    store: str | None = None
    output: str | None = None
    description: str = ""

    def design(self, name: str) -> Design:
        for d in self.designs:
            if d.name == name:
                return d
        raise SmleInputError(f"design = {name!r} is not in study '{self.name}'; its designs: "
                             f"{', '.join(d.name for d in self.designs)}")

    def to_dict(self) -> dict:
        return {"name": self.name, "master_seed": self.master_seed, "description": self.description,
                "designs": [d.to_dict() for d in self.designs]}

    @classmethod
    def from_dict(cls, data: Mapping) -> "Study":
        return cls(name=data["name"], master_seed=data["master_seed"], description=data.get("description", ""),
                   designs=tuple(Design.from_dict(d) for d in data["designs"]))


def design_key(name: str) -> int:
    """A 32-bit integer from a design name (SHA-256; stable across processes and machines)."""
    return int.from_bytes(hashlib.sha256(name.encode("utf-8")).digest()[:4], "little")


def _seed_words(master_seed: int, name: str, replication: int) -> np.ndarray:
    return np.random.SeedSequence([int(master_seed), design_key(name), int(replication)]).generate_state(2, np.uint32)


def replication_seeds(master_seed: int, design: Design | str, replication: int) -> tuple[int, int]:
    """``(data_seed, eis_seed)`` of a replication, from the master seed, design name and index.

    ``numpy.random.SeedSequence([master_seed, design_key(name), replication])`` gives two
    32-bit words: the first seeds :func:`smle.simulate`, the second (plus the estimator's
    ``seed_offset``) seeds :func:`smle.fit`. A design with ``data_from`` takes the first word
    from the sequence of the design it names (the same data) and the second from its own.
    """
    name = design if isinstance(design, str) else design.name
    words = _seed_words(master_seed, name, replication)
    data_from = None if isinstance(design, str) else design.data_from
    data_seed = words[0] if data_from is None else _seed_words(master_seed, data_from, replication)[0]
    offset = 0 if isinstance(design, str) else design.estimator.seed_offset
    return int(data_seed), int(words[1]) + int(offset)


# ---------------------------------------------------------------------------------------------
# TOML

_STUDY_KEYS = {"name", "master_seed", "description"}
_OUTPUT_KEYS = {"store", "folder"}
_ESTIMATOR_KEYS = {f.name for f in dataclasses.fields(Estimator)}
_DESIGN_KEYS = {"name", "model", "model_options", "params", "n_periods", "replications", "data_from"} | _ESTIMATOR_KEYS


def _unknown(where: str, table: Mapping, accepted: set) -> None:
    unknown = sorted(set(table) - accepted)
    if unknown:
        raise SmleInputError(f"{where} has unknown key(s) {', '.join(unknown)}; accepted: {', '.join(sorted(accepted))}")


def study_from_mapping(data: Mapping, base: Path | None = None) -> Study:
    """A :class:`Study` from the parsed TOML layout (see :func:`load_study`)."""
    _unknown("the study file", data, {"study", "outputs", "defaults", "design"})
    head = data.get("study", {})
    _unknown("[study]", head, _STUDY_KEYS)
    if "master_seed" not in head:
        raise SmleInputError("[study] needs master_seed (a non-negative integer)")
    outputs = data.get("outputs", {})
    _unknown("[outputs]", outputs, _OUTPUT_KEYS)
    defaults = data.get("defaults", {})
    _unknown("[defaults]", defaults, _DESIGN_KEYS - {"name"})
    raw_designs = data.get("design", [])
    if not isinstance(raw_designs, list):
        raise SmleInputError("design must be an array of tables: write each cell as [[design]]")
    designs = []
    for i, raw in enumerate(raw_designs):
        merged = {**defaults, **raw}
        if "params" in defaults and "params" in raw:
            merged["params"] = {**defaults["params"], **raw["params"]}
        where = f"[[design]] number {i + 1}" + (f" ('{raw['name']}')" if "name" in raw else "")
        _unknown(where, merged, _DESIGN_KEYS)
        missing = [k for k in ("name", "model", "params", "n_periods", "replications") if k not in merged]
        if missing:
            raise SmleInputError(f"{where} lacks {', '.join(missing)} (give them in the design or in [defaults])")
        estimator = Estimator(**{k: merged[k] for k in _ESTIMATOR_KEYS if k in merged})
        designs.append(Design(name=merged["name"], model=merged["model"], params=dict(merged["params"]),
                              n_periods=merged["n_periods"], replications=merged["replications"],
                              estimator=estimator, model_options=dict(merged.get("model_options", {})),
                              data_from=merged.get("data_from")))

    def resolve(path):
        if path is None:
            return None
        p = Path(path)
        return str(p if p.is_absolute() or base is None else base / p)

    study = Study(name=head.get("name", "study"), master_seed=head["master_seed"], designs=tuple(designs),
                  store=resolve(outputs.get("store")), output=resolve(outputs.get("folder")),
                  description=head.get("description", ""))
    return check_study(study)


def load_study(path) -> Study:
    """Read and validate a study file (TOML); the format is in this module's docstring.

    Layout::

        [study]
        name = "pilot"
        master_seed = 2024
        [outputs]                  # paths relative to the study file
        store = "pilot.sqlite"
        folder = "pilot-results"   # summary tables and figures
        [defaults]                 # any design key, applied to every design
        model = "sv"
        n_periods = 500
        replications = 100
        n_draws = 32
        [[design]]
        name = "phi=0.95"
        params = { mu = -7.36, phi = 0.95, sigma_eta = 0.26 }

    Design keys: name, model, model_options, params, n_periods, replications, data_from and
    the :class:`Estimator` fields (n_draws, antithetic, n_seeds, seed_offset, start, max_steps,
    gtol, tol, max_iter, level, method).
    """
    path = Path(path)
    try:
        text = path.read_text()
    except FileNotFoundError:
        raise SmleInputError(f"study file {str(path)!r} does not exist") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise SmleInputError(f"study file {str(path)!r} is not valid TOML: {error}") from None
    return study_from_mapping(data, base=path.resolve().parent)


def canonical_json(value) -> str:
    """Stable JSON text (sorted keys) for comparing definitions stored in a study store."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"))


def format_text() -> str:
    """The "Study file format" section of this module's docstring (for ``smle study --help``)."""
    text = __doc__[__doc__.index("Study file format"):]
    return text.replace("Example::", "Example:")
