"""Resumable backtests: each finished block of :func:`smle.decision.backtest.backtest` committed to
an SQLite store, so that a stopped backtest (killed, out of time, a machine restarted) resumes.

A backtest is a sequence of blocks (:class:`~smle.decision.backtest.BacktestPlan`): block b
re-estimates on the window before its first forecast period and forecasts ``refit_every``
periods. A block's numbers are a function of the settings, the data, the block index (the
forecast seeds are :func:`~smle.decision.backtest.step_seed` of the seed and the step) and the
estimates it is warm-started from, which are the previous block's as stored (JSON floats
round-trip exactly). So a backtest resumed from the last stored block gives the numbers of an
uninterrupted run with the same seed, bit for bit; only ``elapsed_seconds`` (the sum of the
blocks' own times) depends on the run.

The store is a study-style SQLite file (WAL mode, one transaction per block, one writing process,
created complete and linked into place; :class:`smle.study.store.SingleWriter`). Tables:

``meta(key, value)``
    store_kind ("backtest"), schema_version (:data:`SCHEMA_VERSION`), smle_version, created_at,
    last_activity, runner_pid, runner_host.
``backtests(name, definition, n_blocks)``
    one row per backtest kept in the store (a store may hold a model and its rival, e.g.
    ``smle backtest --against``); ``definition`` is the JSON of everything that determines its
    numbers (:func:`backtest_identity`). A run whose definition differs is refused.
``blocks(backtest, block, refit, value_at_risk, var_se, expected_shortfall, log_score, seconds, finished_at)``
    one row per finished block; ``refit`` and the arrays are JSON.
"""

from __future__ import annotations

import hashlib
import json
import time
from pathlib import Path

import numpy as np

from smle.decision.backtest import (Backtest, assemble, block_message, plan_backtest, reporter, run_block,
                                    warm_start)
from smle.decision.backtest import backtest as _backtest_in_memory
from smle.errors import SmleInputError, describe
from smle.models.base import model_options
from smle.study.store import SingleWriter, _connect, _now, _read_meta, _Transaction

SCHEMA_VERSION = 1

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT);
CREATE TABLE IF NOT EXISTS backtests (name TEXT PRIMARY KEY, definition TEXT NOT NULL, n_blocks INTEGER NOT NULL);
CREATE TABLE IF NOT EXISTS blocks (
    backtest TEXT NOT NULL REFERENCES backtests(name), block INTEGER NOT NULL, refit TEXT NOT NULL,
    value_at_risk TEXT NOT NULL, var_se TEXT NOT NULL, expected_shortfall TEXT NOT NULL, log_score TEXT NOT NULL,
    seconds REAL, finished_at TEXT, PRIMARY KEY (backtest, block));
"""
_ARRAYS = ("value_at_risk", "var_se", "expected_shortfall", "log_score")


def _digest(values) -> str:
    return hashlib.sha256(values).hexdigest()


def backtest_identity(plan, fixed, fit_options) -> dict:
    """Everything that determines a backtest's numbers, as JSON-ready values: model and options,
    window, refit_every, levels, n_paths, seed, fixed parameters, fit options, the data (shape and
    SHA-256 of its float64 bytes), the dates (SHA-256 of their text) and the smle version."""
    import smle

    y = np.ascontiguousarray(plan.y, dtype=np.float64)
    dates = None if plan.dates is None else _digest("\n".join(map(str, plan.dates)).encode())
    return {"model": plan.model.name, "model_options": model_options(plan.model), "window": plan.window,
            "refit_every": plan.refit_every, "levels": list(plan.levels), "n_paths": plan.n_paths, "seed": plan.seed,
            "fixed": None if not fixed else {k: float(v) for k, v in sorted(dict(fixed).items())},
            "fit_options": json.loads(json.dumps(fit_options, sort_keys=True, default=repr)),
            "data": f"{list(y.shape)} sha256 {_digest(y.tobytes())}", "dates": dates,
            "smle_version": smle.__version__}


def _text(value) -> str:
    return json.dumps(value, sort_keys=True, separators=(",", ":"))


def _differences(stored: dict, given: dict) -> str:
    keys = sorted(set(stored) | set(given))
    return "; ".join(f"{k}: stored {_text(stored.get(k))}, given {_text(given.get(k))}"
                     for k in keys if _text(stored.get(k)) != _text(given.get(k)))


def check_backtest_store(path, label: str, identity: dict) -> None:
    """Refuse (:class:`SmleInputError`, nothing written) a file at ``path`` that is not a backtest
    store of this schema, or whose backtest ``label`` was made with other settings (named)."""
    path = Path(path)
    if not path.exists():
        return
    connection = _connect(path, read_only=True)
    try:
        try:
            meta = _read_meta(connection, path)
        except SmleInputError:
            raise SmleInputError(f"store {str(path)!r} is not an smle backtest store (not an SQLite file of smle); "
                                 "accepted: a store written by a backtest, or a new path") from None
        if meta.get("store_kind") != "backtest":
            raise SmleInputError(f"store {str(path)!r} is not a backtest store ({meta.get('store_kind', 'a study')} "
                                 "store); accepted: a store written by a backtest, or a new path")
        if meta.get("schema_version") != str(SCHEMA_VERSION):
            raise SmleInputError(f"store {str(path)!r} has backtest store schema {meta.get('schema_version')}; this "
                                 f"smle reads schema {SCHEMA_VERSION}; use a new store path")
        row = connection.execute("SELECT definition FROM backtests WHERE name = ?", (label,)).fetchone()
        if row is not None and _text(json.loads(row["definition"])) != _text(identity):
            raise SmleInputError(
                f"backtest '{label}' in store {str(path)!r} was made with other settings ("
                f"{_differences(json.loads(row['definition']), identity)}); accepted: the stored settings, another "
                "label, or a new store path; the store was not changed")
    finally:
        connection.close()


class BacktestStore(SingleWriter):
    """A backtest store opened for writing the blocks of the backtest ``label``."""

    kind = "backtest"

    def __init__(self, path, label: str, identity: dict, n_blocks: int):
        def define(connection):
            connection.executescript(_SCHEMA)
            with _Transaction(connection):
                for key, value in (("store_kind", "backtest"), ("schema_version", str(SCHEMA_VERSION)),
                                   ("smle_version", identity["smle_version"]), ("created_at", _now())):
                    connection.execute("INSERT OR IGNORE INTO meta VALUES (?, ?)", (key, value))
                connection.execute("INSERT OR IGNORE INTO backtests VALUES (?, ?, ?)", (label, _text(identity), n_blocks))

        super().__init__(path, define, lambda: check_backtest_store(path, label, identity))
        self.label = label

    def blocks(self) -> list[dict]:
        """The stored blocks of this backtest, in order (as :func:`run_block` returns them)."""
        rows = self.connection.execute("SELECT * FROM blocks WHERE backtest = ? ORDER BY block", (self.label,))
        found = [{"block": r["block"], "refit": json.loads(r["refit"]), "seconds": r["seconds"],
                  **{key: np.asarray(json.loads(r[key]), float) for key in _ARRAYS}} for r in rows]
        if [b["block"] for b in found] != list(range(len(found))):
            raise SmleInputError(f"store {str(self.path)!r} holds blocks {[b['block'] for b in found]} of backtest "
                                 f"'{self.label}', not a run from the first block; use a new store path")
        return found

    def record(self, done: dict) -> None:
        """Commit one finished block (one transaction)."""
        with self.transaction() as c:
            c.execute("INSERT INTO blocks VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                      (self.label, done["block"], json.dumps(done["refit"]),  # keeps the parameter order
                       *(_text(np.asarray(done[key]).tolist()) for key in _ARRAYS), done["seconds"], _now()))
            c.execute("INSERT OR REPLACE INTO meta VALUES ('last_activity', ?)", (_now(),))


def backtest(model, y, window: int, refit_every: int, levels=(0.01, 0.05), n_paths: int = 10000, seed: int = 0,
             fixed=None, dates=None, progress=True, store=None, label: str = "backtest",
             **fit_options) -> Backtest:
    """Rolling one-step forecasts with re-estimation (:func:`smle.decision.backtest.backtest`, the
    same arguments and result), optionally kept in a store so that a stopped run resumes.

    Args:
      store: path of an SQLite backtest store (created if missing). Each block (a re-estimation
        and its ``refit_every`` forecasts) is committed as it finishes; a call with the same
        store, label and settings computes only the blocks not yet stored and returns the whole
        backtest, equal to an uninterrupted run. Other settings (model, options, window,
        refit_every, levels, n_paths, seed, fixed, fit options, data, dates, smle version) are
        refused with an :class:`SmleInputError` naming what differs. None (default): nothing
        is stored.
      label: the name of this backtest in the store (a store can hold several, e.g. two models
        over the same periods).
      progress: as in :func:`smle.decision.backtest.backtest`; a message after each block.
    """
    if store is None:
        return _backtest_in_memory(model, y, window, refit_every, levels, n_paths, seed, fixed, dates, progress,
                                   **fit_options)
    if not isinstance(store, (str, Path)) or not str(store):
        raise SmleInputError(f"store = {describe(store)} is not accepted; accepted: the path of a backtest store")
    if not isinstance(label, str) or not label:
        raise SmleInputError(f"label = {describe(label)} is not accepted; accepted: a non-empty name")
    plan = plan_backtest(model, y, window, refit_every, levels, n_paths, seed, dates)
    writer = BacktestStore(store, label, backtest_identity(plan, fixed, fit_options), plan.n_blocks)
    say, began = reporter(progress), time.perf_counter()
    try:
        writer.claim()
        blocks = writer.blocks()
        if say and blocks:
            say(f"backtest '{label}': {len(blocks)} of {plan.n_blocks} blocks already in {str(store)!r}"
                f"{'' if len(blocks) == plan.n_blocks else f'; resuming at block {len(blocks) + 1}'}")
        elif say:
            say(f"backtest '{label}': {plan.n_blocks} blocks of up to {plan.refit_every} forecasts, each committed "
                f"to {str(store)!r} as it finishes (a rerun resumes)")
        for block in range(len(blocks), plan.n_blocks):
            done = run_block(plan, block, warm_start(blocks[-1] if blocks else None), fixed, **fit_options)
            writer.record(done)
            blocks.append(done)
            if say:
                say(block_message(plan, done, time.perf_counter() - began))
    finally:
        try:
            writer.release()
        finally:
            writer.close()
    return assemble(plan, blocks)
