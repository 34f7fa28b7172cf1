"""Running a study: what is left to do, where it runs, committing each result as it arrives."""

from __future__ import annotations

import math
import statistics
import sys
import time
from pathlib import Path
from typing import NamedTuple

from smle.errors import SmleInputError
from smle.study import store as store_module
from smle.study.backends import make_backend
from smle.study.spec import Study, canonical_json, check_study, load_study


class RunReport(NamedTuple):
    """What a call of :func:`run_study` did.

    Attributes:
      store: path of the store.
      completed, failed: replications finished by this call (failed ones included in neither
        count of the other).
      skipped: replications already in the store before the call.
      remaining: replications still missing after the call (0 when the study is complete).
      elapsed_seconds: wall time of the call.
      backend, workers: where it ran.
    """

    store: str
    completed: int
    failed: int
    skipped: int
    remaining: int
    elapsed_seconds: float
    backend: str
    workers: int


def format_duration(seconds: float) -> str:
    if seconds != seconds or seconds == float("inf"):
        return "?"
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 5400:
        return f"{seconds / 60:.1f} min"
    return f"{seconds / 3600:.1f} h"


def remaining_seconds(finished, remaining: dict, workers: int, min_warm: int = 3,
                      shape_of: dict | None = None) -> float | None:
    """Wall time left, from the compute times of replications finished after warm-up (None: too early).

    Args:
      finished: ``(design, worker, seconds)`` of each finished replication, in arrival order;
        ``seconds`` is its own compute time on its worker.
      remaining: replications still to run, per design.
      workers: how many run at once.
      min_warm: warm replications needed before an estimate is given.
      shape_of: design name -> compiled shape (:func:`compile_shape`); designs of one shape
        share a compiled program (default: each design its own).

    The first replication of a compiled shape on a worker carries the compilation of the
    estimator (tens of seconds against a few for a fit) and is left out; a design's typical time is the
    median of its warm replications (of all warm ones while it has none). The remaining work,
    sum over designs of count x typical time, is shared by ``min(workers, replications left)``.
    """
    seen, warm = set(), {}
    shape_of = shape_of or {}
    for design, worker, seconds in finished:
        key = (shape_of.get(design, design), worker)
        if key in seen and seconds is not None and math.isfinite(seconds):
            warm.setdefault(design, []).append(float(seconds))
        seen.add(key)
    every = [t for times in warm.values() for t in times]
    if len(every) < min_warm:
        return None
    left = sum(remaining.values())
    if left <= 0:
        return 0.0
    overall = statistics.median(every)
    work = sum(n * (statistics.median(warm[d]) if d in warm else overall) for d, n in remaining.items())
    return work / max(1, min(workers, left))


def compile_shape(design: dict) -> tuple:
    """What the compiled fit program of a design depends on (model, options, T, EIS settings)."""
    estimator = {k: v for k, v in design["estimator"].items() if k not in ("seed_offset", "start", "level")}
    return (design["model"], canonical_json(design.get("model_options", {})), design["n_periods"],
            canonical_json(estimator))


class Progress:
    """Counts and time remaining, printed to standard error (at most every ``every`` seconds).

    The estimate of the time left comes from :func:`remaining_seconds` (compilation excluded)
    and is shown only once ``min_warm`` replications have run warm.
    """

    def __init__(self, name: str, total: int, already: int, remaining: dict, workers: int = 1, stream=None,
                 every: float = 2.0, min_warm: int = 3):
        self.name, self.total, self.already = name, total, already
        self.remaining, self.workers, self.min_warm = dict(remaining), workers, min_warm
        self.to_run = sum(remaining.values())
        self.stream = stream if stream is not None else sys.stderr
        self.every = every
        self.done = self.failed = 0
        self.finished = []
        self.shape_of = {}
        self.started = time.perf_counter()
        self.last = -1e9

    def write(self, text: str) -> None:
        self.stream.write(text + "\n")
        self.stream.flush()

    def starting(self, design: dict) -> None:
        """Called as a task is handed out: say so when it is the first of its compiled shape."""
        shape = compile_shape(design)
        known = shape in self.shape_of.values()
        self.shape_of[design["name"]] = shape
        if not known:
            e = design["estimator"]
            method = e.get("method", "eis")  # the stored identity names the method only when not "eis"
            likelihood = f"{e['n_draws']} draws" if method == "eis" else f"method {method}"
            self.write(f"study {self.name}: compiling the estimator for design '{design['name']}' ({design['model']}, "
                       f"T = {design['n_periods']}, {likelihood}) on each worker that takes it; "
                       "the first results come after that ...")

    def update(self, row: dict) -> None:
        self.done += 1
        self.failed += row["status"] == "failed"
        self.remaining[row["design"]] = max(0, self.remaining.get(row["design"], 0) - 1)
        self.finished.append((row["design"], row.get("worker"), row.get("elapsed_seconds")))
        now = time.perf_counter()
        if now - self.last >= self.every or self.done == self.to_run:
            self.last = now
            self.write(self.line(now))

    def line(self, now: float | None = None) -> str:
        elapsed = (now or time.perf_counter()) - self.started
        head = (f"study {self.name}: {self.already + self.done}/{self.total} replications stored"
                f"{f' ({self.failed} failed this run)' if self.failed else ''}; this run {self.done}/{self.to_run} "
                f"in {format_duration(elapsed)}")
        if self.done >= self.to_run:
            return head + "; done"
        left = remaining_seconds(self.finished, self.remaining, self.workers, self.min_warm, self.shape_of)
        if left is None:
            return head + f"; time left: estimated once {self.min_warm} replications have run after compilation"
        return head + f"; about {format_duration(left)} left"


def _announcing(tasks, meter: Progress):
    """The tasks, telling ``meter`` as each is handed to the back-end."""
    for task in tasks:
        meter.starting(task[0])
        yield task


def _store_path(study: Study, store) -> Path:
    path = store if store is not None else study.store
    if path is None:
        raise SmleInputError(f"study '{study.name}' names no store: give store= (--store) or [outputs] store in the file")
    return Path(path)


def pending_replications(study: Study, store=None, retry_failed: bool = False) -> list:
    """``(design, replication)`` pairs not yet stored (failed ones too, with ``retry_failed``), in study order."""
    path = _store_path(study, store)
    done = set()
    if path.exists():
        connection = store_module.open_read_only(path)
        try:
            query = "SELECT design, replication FROM replications" + (" WHERE status = 'ok'" if retry_failed else "")
            done = {(r[0], r[1]) for r in connection.execute(query)}
        finally:
            connection.close()
    return [(d, r) for d in study.designs for r in range(d.replications) if (d.name, r) not in done]


def run_study(
    study,
    store=None,
    backend: str = "pool",
    workers: int | None = None,
    scheduler: str | None = None,
    retry_failed: bool = False,
    batch_size: int = 1,
    progress: bool = True,
    allow_new_version: bool = False,
    max_replications: int | None = None,
    scheduler_timeout: float = 10.0,
    stop_after_seconds: float | None = None,
) -> RunReport:
    """Run (or resume) a study: every replication not yet in the store is computed and committed.

    Args:
      study: a :class:`~smle.study.Study` or the path of a study file (TOML).
      store: path of the SQLite store (default: the study's ``[outputs] store``).
      backend: ``"inprocess"``, ``"pool"`` (local spawned processes, the default) or ``"dask"``
        (a new LocalCluster unless ``scheduler`` is given).
      workers: pool or LocalCluster size (default: the number of cores; 2 for LocalCluster).
      scheduler: address of a running Dask scheduler (implies ``backend="dask"``).
      retry_failed: run again the replications stored as failed.
      batch_size: replications of one design per task.
      progress: counts, rate and time left on standard error.
      allow_new_version: continue a store written by another smle version.
      max_replications: stop after this many (for trials and tests; default: all).
      scheduler_timeout: seconds to wait for the Dask scheduler to answer.
      stop_after_seconds: stop taking results after this much wall time (a run of the same
        study later resumes; replications still computing at the stop are not stored).

    Returns:
      A :class:`RunReport`. Bad input raises :class:`~smle.errors.SmleInputError` before
      anything is written.
    """
    started = time.perf_counter()
    study = check_study(load_study(study) if isinstance(study, (str, Path)) else study)
    path = _store_path(study, store)
    if isinstance(batch_size, bool) or not isinstance(batch_size, int) or batch_size < 1:
        raise SmleInputError(f"batch_size = {batch_size!r} is not accepted; accepted: an integer >= 1")
    if scheduler is not None and backend == "inprocess":
        raise SmleInputError(f"scheduler = {scheduler!r} needs backend 'dask' (or the default), not 'inprocess'")
    store_module.check_compatible(path, study, allow_new_version)
    todo = pending_replications(study, path, retry_failed)
    if max_replications is not None:
        todo = todo[:max_replications]
    total = sum(d.replications for d in study.designs)
    already = total - len(pending_replications(study, path, retry_failed))  # rows kept as they are
    executor = make_backend(backend, workers, scheduler, scheduler_timeout)
    if not todo:
        if progress:
            print(f"study {study.name}: all {total} replications are stored in {path}", file=sys.stderr)
        return RunReport(str(path), 0, 0, already, 0, time.perf_counter() - started, executor.name, 0)

    designs = {d.name: d for d in study.designs}
    # Round-robin over designs, so that a study stopped early has every design equally far along.
    chunks = []
    for name in designs:
        reps = [r for d, r in todo if d.name == name]
        chunks.append([(designs[name].to_dict(), study.master_seed, reps[i:i + batch_size])
                       for i in range(0, len(reps), batch_size)])
    tasks = [c[i] for i in range(max(map(len, chunks))) for c in chunks if i < len(c)]

    completed = failed = 0
    with executor:  # an unreachable scheduler raises here, before the store is opened for writing
        writer = store_module.Store(path, study, allow_new_version)
        try:
            writer.claim()
            remaining = {}
            for d, _ in todo:
                remaining[d.name] = remaining.get(d.name, 0) + 1
            meter = Progress(study.name, total, already, remaining, executor.workers) if progress else None
            if progress:
                print(f"study {study.name}: {len(todo)} replications to run on {executor.name} "
                      f"({executor.workers} worker{'s' if executor.workers != 1 else ''}), store {path}",
                      file=sys.stderr, flush=True)
                tasks = _announcing(tasks, meter)
            rows = executor.map(tasks)
            for row in rows:
                writer.record(row)
                completed += row["status"] == "ok"
                failed += row["status"] == "failed"
                if meter:
                    meter.update(row)
                if stop_after_seconds is not None and time.perf_counter() - started > stop_after_seconds:
                    if progress:
                        print(f"study {study.name}: stopping after {format_duration(stop_after_seconds)} as asked",
                              file=sys.stderr, flush=True)
                    break
            rows.close()
        finally:
            try:
                writer.release()
            finally:
                writer.close()
    remaining = len(pending_replications(study, path, retry_failed=False))
    return RunReport(str(path), completed, failed, already, remaining, time.perf_counter() - started,
                     executor.name, executor.workers)
