"""The study store: one SQLite file (WAL mode) holding a study's definition and every result.

Tables (schema version :data:`SCHEMA_VERSION`):

``meta(key, value)``
    schema_version, smle_version (of the run that created the store), study (the definition
    as canonical JSON), created_at, runner_pid, runner_host, last_activity.
``designs(name, position, replications, definition)``
    one row per design; ``definition`` is the JSON of everything that determines its numbers.
``replications(design, replication, status, ...)``
    one row per finished replication, key (design, replication): seeds, status ("ok" or
    "failed"), error, loglik, nse, converged, message, iterations, n_evaluations, grad_norm,
    eis_iterations, eis_converged, ess, level, fit_seconds, elapsed_seconds, worker,
    finished_at, smle_version, attempts, exact_loglik (the exact log-likelihood at the estimate
    where the state is one-dimensional: the fit's own for the exact method, the exact reference
    for EIS; a column added within schema 1, added to older stores when a runner opens them
    and read as missing from stores that lack it).
``estimates(design, replication, parameter, truth, estimate, std_error, lower, upper, simulation_std_error)``
    one row per parameter of each successful replication.

The runner is the only writer; each finished replication is one transaction, committed before
the next result is taken, so a killed study loses at most the replications still computing.
A new store is written complete in a temporary file of the same folder and then linked into
place, so a store file that exists always has its tables (a reader polling a starting study
sees "does not exist" or a whole store, never an empty file).
"""

from __future__ import annotations

import datetime
import json
import os
import socket
import sqlite3
from pathlib import Path

from smle.errors import SmleInputError
from smle.study.spec import Study, canonical_json

SCHEMA_VERSION = 1

TIMING_COLUMNS = ("fit_seconds", "elapsed_seconds", "worker", "finished_at", "attempts")

REPLICATION_COLUMNS = (
    "design", "replication", "status", "data_seed", "eis_seed", "error", "loglik", "nse", "converged", "message",
    "iterations", "n_evaluations", "grad_norm", "eis_iterations", "eis_converged", "ess", "level",
    "fit_seconds", "elapsed_seconds", "worker", "finished_at", "smle_version", "attempts", "exact_loglik",
)
ESTIMATE_COLUMNS = ("design", "replication", "parameter", "truth", "estimate", "std_error", "lower", "upper",
                    "simulation_std_error")

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT);
CREATE TABLE IF NOT EXISTS designs (
    name TEXT PRIMARY KEY, position INTEGER NOT NULL, replications INTEGER NOT NULL, definition TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS replications (
    design TEXT NOT NULL REFERENCES designs(name), replication INTEGER NOT NULL,
    status TEXT NOT NULL CHECK (status IN ('ok', 'failed')),
    data_seed INTEGER NOT NULL, eis_seed INTEGER NOT NULL, error TEXT,
    loglik REAL, nse REAL, converged INTEGER, message TEXT, iterations INTEGER, n_evaluations INTEGER,
    grad_norm REAL, eis_iterations INTEGER, eis_converged INTEGER, ess REAL, level REAL,
    fit_seconds REAL, elapsed_seconds REAL, worker TEXT, finished_at TEXT, smle_version TEXT NOT NULL,
    attempts INTEGER NOT NULL DEFAULT 1, exact_loglik REAL,
    PRIMARY KEY (design, replication));
CREATE TABLE IF NOT EXISTS estimates (
    design TEXT NOT NULL, replication INTEGER NOT NULL, parameter TEXT NOT NULL,
    truth REAL NOT NULL, estimate REAL, std_error REAL, lower REAL, upper REAL, simulation_std_error REAL,
    PRIMARY KEY (design, replication, parameter),
    FOREIGN KEY (design, replication) REFERENCES replications(design, replication));
"""


def _now() -> str:
    return datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")


def _connect(path: Path, read_only: bool) -> sqlite3.Connection:
    if read_only:
        connection = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=30)
    else:
        connection = sqlite3.connect(path, timeout=30, isolation_level=None)
    connection.row_factory = sqlite3.Row
    return connection


def _read_meta(connection, path) -> dict:
    try:
        return {r["key"]: r["value"] for r in connection.execute("SELECT key, value FROM meta")}
    except sqlite3.DatabaseError as error:
        raise SmleInputError(f"store {str(path)!r} is not an smle study store ({error})") from None


def check_compatible(path, study: Study | None = None, allow_new_version: bool = False) -> dict | None:
    """Read-only check that the store at ``path`` can take results of ``study`` (None if no store yet).

    Raises :class:`SmleInputError` for a file that is not a study store, a store schema this
    smle does not read, a store made by another smle version (unless ``allow_new_version``), or
    a design whose definition differs from the stored one (its numbers would not match).
    Replication counts may grow and designs may be added.
    """
    import smle

    path = Path(path)
    if not path.exists():
        return None
    connection = _connect(path, read_only=True)
    try:
        meta = _read_meta(connection, path)
        if "schema_version" not in meta:
            raise SmleInputError(f"store {str(path)!r} is not an smle study store (no schema_version)")
        if meta.get("store_kind", "study") != "study":
            raise SmleInputError(f"store {str(path)!r} is a {meta['store_kind']} store, not a study store; "
                                 "accepted: a store written by a study (smle study run)")
        if meta["schema_version"] != str(SCHEMA_VERSION):
            raise SmleInputError(
                f"store {str(path)!r} has store schema version {meta['schema_version']} (written by smle "
                f"{meta.get('smle_version', '?')}); this smle {smle.__version__} reads schema version {SCHEMA_VERSION}. "
                "Use a new store path, or the smle version that wrote it; the store was not changed")
        if meta.get("smle_version") != smle.__version__ and not allow_new_version:
            raise SmleInputError(
                f"store {str(path)!r} was written by smle {meta.get('smle_version')}, this is smle {smle.__version__}; "
                "results of two versions would be mixed in one study. Use a new store path, or pass "
                "allow_new_version=True (--allow-new-version) to continue anyway; the store was not changed")
        if study is not None:
            stored = {r["name"]: json.loads(r["definition"]) for r in connection.execute("SELECT name, definition FROM designs")}
            if meta.get("master_seed") is not None and int(meta["master_seed"]) != study.master_seed:
                raise SmleInputError(
                    f"master_seed = {study.master_seed} differs from the store's {meta['master_seed']} ({str(path)!r}); "
                    "use the stored seed or a new store path; the store was not changed")
            for design in study.designs:
                if design.name in stored and canonical_json(stored[design.name]) != canonical_json(design.identity()):
                    raise SmleInputError(
                        f"design '{design.name}' differs from its definition in store {str(path)!r}: "
                        f"stored {canonical_json(stored[design.name])}, given {canonical_json(design.identity())}; "
                        "rename the design or use a new store path; the store was not changed")
        return meta
    finally:
        connection.close()


class SingleWriter:
    """An SQLite store file opened for writing by one process (WAL, full synchronous commits).

    A new file is built complete by ``define(connection)`` in a temporary file of the same folder
    and then linked into place, so a reader never sees a store file without its tables; ``check()``
    refuses an existing file that cannot take this writer's results (called before anything is
    written). The base of the study :class:`Store` and of the backtest store
    (:mod:`smle.study.backtest_runs`); ``kind`` names what writes it in messages.
    """

    kind = "study"

    def __init__(self, path, define, check):
        self.path = Path(path)
        check()
        self.path.parent.mkdir(parents=True, exist_ok=True)
        if not self.path.exists() and not _create_atomically(self.path, define):
            check()  # another process created it meanwhile
        self.connection = _connect(self.path, read_only=False)
        c = self.connection
        c.execute("PRAGMA journal_mode=WAL")
        c.execute("PRAGMA synchronous=FULL")
        c.execute("PRAGMA foreign_keys=ON")
        define(c)

    def transaction(self):
        return _Transaction(self.connection)

    def claim(self) -> None:
        """Record this process as the store's writer; refuse if another live writer holds it."""
        meta = {r["key"]: r["value"] for r in self.connection.execute("SELECT key, value FROM meta")}
        pid, host = meta.get("runner_pid"), meta.get("runner_host")
        if pid and host == socket.gethostname() and int(pid) != os.getpid() and _alive(int(pid)):
            raise SmleInputError(f"store {str(self.path)!r} is being written by a running {self.kind} (process {pid} "
                                 f"on {host}); wait for it or stop it first")
        with self.transaction():
            self.connection.execute("INSERT OR REPLACE INTO meta VALUES ('runner_pid', ?)", (str(os.getpid()),))
            self.connection.execute("INSERT OR REPLACE INTO meta VALUES ('runner_host', ?)", (socket.gethostname(),))

    def release(self) -> None:
        with self.transaction():
            self.connection.execute("DELETE FROM meta WHERE key IN ('runner_pid', 'runner_host')")

    def close(self) -> None:
        self.connection.close()


class Store(SingleWriter):
    """A study store opened for writing by the (single) runner."""

    def __init__(self, path, study: Study, allow_new_version: bool = False):
        super().__init__(path, lambda connection: _write_definition(connection, study),
                         lambda: check_compatible(path, study, allow_new_version))

    def done_keys(self, include_failed: bool = True) -> set:
        query = "SELECT design, replication FROM replications" + ("" if include_failed else " WHERE status = 'ok'")
        return {(r[0], r[1]) for r in self.connection.execute(query)}

    def record(self, row: dict) -> None:
        """Commit one finished replication (replacing a failed attempt of the same key)."""
        c = self.connection
        with self.transaction():
            previous = c.execute("SELECT status, attempts FROM replications WHERE design = ? AND replication = ?",
                                 (row["design"], row["replication"])).fetchone()
            attempts = 1
            if previous is not None:
                if previous["status"] == "ok":
                    raise RuntimeError(f"replication {row['replication']} of design '{row['design']}' is already stored")
                attempts = previous["attempts"] + 1
                c.execute("DELETE FROM replications WHERE design = ? AND replication = ?",
                          (row["design"], row["replication"]))
            values = {**row, "attempts": attempts}
            for flag in ("converged", "eis_converged"):
                if values.get(flag) is not None:
                    values[flag] = int(values[flag])
            c.execute(f"INSERT INTO replications ({', '.join(REPLICATION_COLUMNS)}) VALUES "
                      f"({', '.join('?' * len(REPLICATION_COLUMNS))})",
                      [values.get(k) for k in REPLICATION_COLUMNS])
            c.executemany(f"INSERT INTO estimates ({', '.join(ESTIMATE_COLUMNS)}) VALUES "
                          f"({', '.join('?' * len(ESTIMATE_COLUMNS))})",
                          [[row["design"], row["replication"]] + [e[k] for k in ESTIMATE_COLUMNS[2:]]
                           for e in row["estimates"]])
            c.execute("INSERT OR REPLACE INTO meta VALUES ('last_activity', ?)", (_now(),))


def _write_definition(c: sqlite3.Connection, study: Study) -> None:
    """Tables (if missing), meta and design rows; the identity of existing designs is kept."""
    import smle

    c.executescript(_SCHEMA)
    columns = {r[1] for r in c.execute("PRAGMA table_info(replications)")}
    if "exact_loglik" not in columns:  # a store written before the column existed (same schema otherwise)
        c.execute("ALTER TABLE replications ADD COLUMN exact_loglik REAL")
    with _Transaction(c):
        c.execute("INSERT OR IGNORE INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
        c.execute("INSERT OR IGNORE INTO meta VALUES ('smle_version', ?)", (smle.__version__,))
        c.execute("INSERT OR IGNORE INTO meta VALUES ('created_at', ?)", (_now(),))
        c.execute("INSERT OR IGNORE INTO meta VALUES ('master_seed', ?)", (str(study.master_seed),))
        c.execute("INSERT OR REPLACE INTO meta VALUES ('study', ?)", (canonical_json(study.to_dict()),))
        c.execute("INSERT OR REPLACE INTO meta VALUES ('study_name', ?)", (study.name,))
        for position, design in enumerate(study.designs):
            c.execute(
                "INSERT INTO designs VALUES (?, ?, ?, ?) ON CONFLICT(name) DO UPDATE SET "
                "position = excluded.position, replications = excluded.replications",
                (design.name, position, design.replications, canonical_json(design.identity())))


def _create_atomically(path: Path, define) -> bool:
    """Write a complete new store (``define(connection)``) to a temporary file beside ``path``,
    then link it to ``path``.

    Returns False if ``path`` appeared meanwhile (``os.link`` refuses to replace it: another
    runner won the race), and the caller checks that store instead.
    The temporary file is closed (WAL checkpointed, no -wal/-shm left) before it is linked.
    """
    temporary = path.with_name(f".{path.name}.{os.getpid()}.{os.urandom(4).hex()}.creating")
    try:
        connection = sqlite3.connect(temporary, isolation_level=None)
        try:
            connection.execute("PRAGMA journal_mode=WAL")
            define(connection)
        finally:
            connection.close()
        try:
            os.link(temporary, path)
        except FileExistsError:
            return False
        except OSError:  # a file system without hard links: replace only if still absent (best effort)
            if path.exists():
                return False
            os.replace(temporary, path)
        return True
    finally:
        temporary.unlink(missing_ok=True)


class _Transaction:
    def __init__(self, connection):
        self.connection = connection

    def __enter__(self):
        self.connection.execute("BEGIN IMMEDIATE")
        return self.connection

    def __exit__(self, kind, value, tb):
        self.connection.execute("COMMIT" if kind is None else "ROLLBACK")
        return False


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def open_read_only(path) -> sqlite3.Connection:
    """A read-only connection to an existing store (checked to be one this smle reads)."""
    path = Path(path)
    if not path.exists():
        raise SmleInputError(f"store {str(path)!r} does not exist")
    check_compatible(path, None, allow_new_version=True)
    return _connect(path, read_only=True)


def read_meta(path) -> dict:
    connection = open_read_only(path)
    try:
        return _read_meta(connection, path)
    finally:
        connection.close()


def runner_alive(meta: dict) -> bool:
    """Whether the runner recorded in ``meta`` is a live process on this host."""
    pid, host = meta.get("runner_pid"), meta.get("runner_host")
    return bool(pid) and host == socket.gethostname() and _alive(int(pid))
