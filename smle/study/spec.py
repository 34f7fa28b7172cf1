"""Study definitions: designs, estimator settings, the master seed; from TOML or Python.

A study is a list of :class:`Design` (model, true parameters, sample length, replications,
:class:`Estimator` settings) and a master seed. Replication ``r`` of design ``d`` draws its
data and its common random numbers from ``SeedSequence([master_seed, design_key(d), r])``
alone (:func:`replication_seeds`), so any row can be recomputed on its own and no result
depends on the order or place in which replications run. The design key is derived from the
design's *name* (not its position), so designs may be reordered or added to a file without
changing the numbers of the others.

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
import math
import tomllib
from pathlib import Path
from typing import Mapping

import numpy as np

from smle.errors import SmleInputError, describe

_START_CHOICES = ("data", "truth")


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
    """

    n_draws: int = 64
    antithetic: bool = True
    n_seeds: int = 1
    seed_offset: int = 0
    start: str = "data"
    max_steps: int = 200
    gtol: float = 1e-6
    tol: float = 1e-8
    max_iter: int = 100
    level: float = 0.95


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
    """

    name: str
    model: str
    params: Mapping[str, float]
    n_periods: int
    replications: int
    estimator: Estimator = Estimator()
    model_options: Mapping[str, object] = dataclasses.field(default_factory=dict)

    def identity(self) -> dict:
        """Everything that determines the numbers of a replication (all but the count)."""
        return {
            "name": self.name,
            "model": self.model,
            "model_options": dict(self.model_options),
            "params": dict(self.params),
            "n_periods": self.n_periods,
            "estimator": dataclasses.asdict(self.estimator),
        }

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


def replication_seeds(master_seed: int, design: Design | str, replication: int) -> tuple[int, int]:
    """``(data_seed, eis_seed)`` of a replication, from the master seed, design name and index.

    ``numpy.random.SeedSequence([master_seed, design_key(name), replication])`` gives two
    32-bit words: the first seeds :func:`smle.simulate`, the second (plus the estimator's
    ``seed_offset``) seeds :func:`smle.fit`.
    """
    name = design if isinstance(design, str) else design.name
    words = np.random.SeedSequence([int(master_seed), design_key(name), int(replication)]).generate_state(2, np.uint32)
    offset = 0 if isinstance(design, str) else design.estimator.seed_offset
    return int(words[0]), int(words[1]) + int(offset)


# ---------------------------------------------------------------------------------------------
# validation


def _is_int(value) -> bool:
    return isinstance(value, (int, np.integer)) and not isinstance(value, bool)


def _check_int(where: str, name: str, value, minimum: int) -> int:
    from smle.validation import check_integer

    try:
        return check_integer(name, value, minimum)
    except SmleInputError as error:
        raise SmleInputError(f"{where}: {error}") from None


def check_design(design: Design) -> Design:
    """Validate a design against the model registry and the estimator's rules; return it normalised."""
    from smle.validation import check_settings
    from smle.models import get_model
    from smle.params import check_params

    if not isinstance(design.name, str) or not design.name.strip():
        raise SmleInputError(f"design name = {describe(design.name)} is not accepted; accepted: a non-empty string")
    where = f"design '{design.name}'"
    try:
        model = get_model(design.model, **dict(design.model_options))
    except SmleInputError as error:
        raise SmleInputError(f"{where}: {error}") from None
    try:
        params = check_params(model.name, model.constraints(), design.params)
    except SmleInputError as error:
        raise SmleInputError(f"{where}: {error}") from None
    n_periods = _check_int(where, "n_periods", design.n_periods, 2)
    replications = _check_int(where, "replications", design.replications, 1)
    e = design.estimator
    try:
        check_settings(e.n_draws, e.antithetic, e.tol, e.max_iter, None, model, n_periods, "fit")
    except SmleInputError as error:
        raise SmleInputError(f"{where}: {error}") from None
    _check_int(where, "n_seeds", e.n_seeds, 1)
    _check_int(where, "seed_offset", e.seed_offset, 0)
    _check_int(where, "max_steps", e.max_steps, 1)
    if e.start not in _START_CHOICES:
        raise SmleInputError(f"{where}: start = {describe(e.start)} is not accepted; accepted: {', '.join(_START_CHOICES)}")
    for name in ("gtol", "tol"):
        value = getattr(e, name)
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not (math.isfinite(value) and value > 0):
            raise SmleInputError(f"{where}: {name} = {describe(value)} is not accepted; accepted: a positive number")
    if isinstance(e.level, bool) or not isinstance(e.level, float) or not 0.5 <= e.level < 1:
        raise SmleInputError(f"{where}: level = {describe(e.level)} is not accepted; accepted: a number in [0.5, 1)")
    estimator = dataclasses.replace(e, gtol=float(e.gtol), tol=float(e.tol), antithetic=bool(e.antithetic))
    return dataclasses.replace(design, model=model.name, params=params, n_periods=n_periods,
                               replications=replications, estimator=estimator,
                               model_options=dict(design.model_options))


def check_study(study: Study) -> Study:
    """Validate every design, the master seed and the design names; return the study normalised."""
    if not _is_int(study.master_seed) or study.master_seed < 0:
        raise SmleInputError(f"master_seed = {describe(study.master_seed)} is not accepted; accepted: a non-negative integer")
    if not study.designs:
        raise SmleInputError(f"study '{study.name}' has no designs; accepted: at least one [[design]] table")
    designs = tuple(check_design(d) for d in study.designs)
    names = [d.name for d in designs]
    repeated = sorted({n for n in names if names.count(n) > 1})
    if repeated:
        raise SmleInputError(f"design names must be unique; repeated: {', '.join(repeated)}")
    return dataclasses.replace(study, designs=designs, master_seed=int(study.master_seed))


# ---------------------------------------------------------------------------------------------
# TOML

_STUDY_KEYS = {"name", "master_seed", "description"}
_OUTPUT_KEYS = {"store", "folder"}
_ESTIMATOR_KEYS = {f.name for f in dataclasses.fields(Estimator)}
_DESIGN_KEYS = {"name", "model", "model_options", "params", "n_periods", "replications"} | _ESTIMATOR_KEYS


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
                              estimator=estimator, model_options=dict(merged.get("model_options", {}))))

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

    Design keys: name, model, model_options, params, n_periods, replications and the
    :class:`Estimator` fields (n_draws, antithetic, n_seeds, seed_offset, start, max_steps,
    gtol, tol, max_iter, level).
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


EXAMPLE_STUDY = """\
# An smle Monte Carlo study (TOML). Run:      smle study run THIS_FILE
# Watch it from another terminal:             smle study status THIS_FILE
# Tables and figures when done (or at any time): smle study summary THIS_FILE
# Every key is described by `smle study --help`.

[study]
name = "example"
master_seed = 2024            # root of every replication's seeds (integer >= 0)
description = "sv at two sample lengths and two persistences; invented settings for a first look"

[outputs]                     # paths relative to this file
store = "example.sqlite"      # results, one committed row per replication; a rerun resumes
folder = "example-summary"    # summary.csv, summary.md, figures

[defaults]                    # applied to every [[design]] below, which may override them
model = "sv"
replications = 20             # raise it later: stored replications are kept
n_draws = 16                  # EIS draws per set (antithetic by default)
start = "data"                # or "truth": start the optimiser at the true parameters

[[design]]
name = "phi=0.95, T=200"      # the name is part of the seeds: keep it once results exist
params = { mu = -7.36, phi = 0.95, sigma_eta = 0.26 }
n_periods = 200

[[design]]
name = "phi=0.95, T=800"
params = { mu = -7.36, phi = 0.95, sigma_eta = 0.26 }
n_periods = 800

[[design]]
name = "phi=0.90, T=200"
params = { mu = -7.36, phi = 0.90, sigma_eta = 0.363 }
n_periods = 200
"""


def write_example(path) -> Path:
    """Write :data:`EXAMPLE_STUDY` to ``path`` (refusing to overwrite a file); return the path."""
    path = Path(path)
    if path.suffix.lower() != ".toml":
        raise SmleInputError(f"path = {str(path)!r} is not accepted; accepted: a file name ending in .toml")
    if path.exists():
        raise SmleInputError(f"path = {str(path)!r} already exists; accepted: a new file (nothing was written)")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(EXAMPLE_STUDY)
    return path
