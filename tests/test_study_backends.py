"""Monte Carlo studies: a SIGKILLed run resumes to the same store; pool and Dask give the same numbers.

Worker processes are spawned (JAX is not fork-safe) and each imports JAX and loads or
compiles the fit program: several seconds per worker, so worker counts stay at 2.
"""

import os
import signal
import sqlite3
import subprocess
import sys
import time

import pytest

from smle.study import export_csv, load_study, run_study
from smle.study.store import TIMING_COLUMNS

STUDY_TOML = """
[study]
name = "kill"
master_seed = 5
[defaults]
model = "sv"
n_periods = 200
n_draws = 16
[[design]]
name = "phi=0.95"
params = { mu = -7.36, phi = 0.95, sigma_eta = 0.26 }
replications = 6
[[design]]
name = "phi=0.90"
params = { mu = -7.36, phi = 0.90, sigma_eta = 0.363 }
replications = 4
"""

RUNNER = """
import sys
from smle.study import run_study
run_study(sys.argv[1], store=sys.argv[2], backend="inprocess", progress=False)
"""


def stored_rows(path):
    """Every stored number and fact except timing and worker identity, in key order."""
    connection = sqlite3.connect(path)
    connection.row_factory = sqlite3.Row
    reps = [tuple((k, r[k]) for k in r.keys() if k not in TIMING_COLUMNS)
            for r in connection.execute("SELECT * FROM replications ORDER BY design, replication")]
    estimates = [tuple(r) for r in connection.execute("SELECT * FROM estimates ORDER BY design, replication, parameter")]
    connection.close()
    return reps, estimates


def count_rows(path):
    if not path.exists():
        return 0
    try:
        connection = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=5)
        try:
            return connection.execute("SELECT COUNT(*) FROM replications").fetchone()[0]
        finally:
            connection.close()
    except sqlite3.OperationalError:
        return 0


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    folder = tmp_path_factory.mktemp("reference")
    (folder / "study.toml").write_text(STUDY_TOML)
    study = load_study(folder / "study.toml")
    run_study(study, store=folder / "inprocess.sqlite", backend="inprocess", progress=False)
    return folder, study


def test_sigkill_mid_run_then_resume_gives_the_uninterrupted_store(reference, tmp_path):
    folder, study = reference
    store = tmp_path / "killed.sqlite"
    process = subprocess.Popen([sys.executable, "-c", RUNNER, str(folder / "study.toml"), str(store)],
                               stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 120
        while count_rows(store) < 3 and process.poll() is None and time.monotonic() < deadline:
            time.sleep(0.05)
        assert process.poll() is None, process.stderr.read().decode()
        os.kill(process.pid, signal.SIGKILL)
        process.wait(timeout=30)
    finally:
        if process.poll() is None:
            os.kill(process.pid, signal.SIGKILL)
            process.wait()
    assert process.returncode == -signal.SIGKILL
    partial = count_rows(store)
    assert 3 <= partial < 10
    report = run_study(study, store=store, backend="inprocess", progress=False)
    assert report.skipped == partial and report.completed == 10 - partial and report.remaining == 0
    assert stored_rows(store) == stored_rows(folder / "inprocess.sqlite")


@pytest.mark.parametrize("backend", ["pool", "dask"])
def test_pool_and_dask_give_the_in_process_numbers(reference, tmp_path, backend):
    if backend == "dask":
        pytest.importorskip("distributed")
    folder, study = reference
    store = tmp_path / f"{backend}.sqlite"
    report = run_study(study, store=store, backend=backend, workers=2, batch_size=2, progress=False)
    assert (report.completed, report.remaining, report.workers) == (10, 0, 2)
    assert stored_rows(store) == stored_rows(folder / "inprocess.sqlite")
    workers = set(export_csv(store)["worker"])
    assert all(str(os.getpid()) not in w.split(":")[1] for w in workers)
