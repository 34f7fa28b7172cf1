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

from _processes import count_rows as count_replications
from _processes import sigkill_when
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
    return count_replications(path, "replications")


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
    sigkill_when(["-c", RUNNER, str(folder / "study.toml"), str(store)], lambda: count_rows(store) >= 3)
    partial = count_rows(store)
    assert 3 <= partial < 10
    report = run_study(study, store=store, backend="inprocess", progress=False)
    assert report.skipped == partial and report.completed == 10 - partial and report.remaining == 0
    assert stored_rows(store) == stored_rows(folder / "inprocess.sqlite")


POOL_RUNNER = """
import sys
from smle.study import run_study
if __name__ == "__main__":
    run_study(sys.argv[1], store=sys.argv[2], backend="pool", workers=2, progress=False)
"""


def children_of(pid):
    """Pids of the live (not zombie) processes whose parent is ``pid``, from /proc."""
    found = set()
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            try:
                with open(f"/proc/{entry}/stat") as handle:
                    fields = handle.read().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if fields[0] != "Z" and int(fields[1]) == pid:
                found.add(int(entry))
    return found


def alive(pid):
    try:
        with open(f"/proc/{pid}/stat") as handle:
            return handle.read().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="finds the workers through /proc")
def test_pool_workers_end_when_their_runner_is_sigkilled(tmp_path):
    """A SIGKILLed runner leaves no pool worker behind (before the fix: 2 orphaned workers and the
    resource tracker in 8 of 10 kills). The runner is killed while its workers are mid-study."""
    store = tmp_path / "pool-killed.sqlite"
    (tmp_path / "runner.py").write_text(POOL_RUNNER)
    study_file = tmp_path / "many.toml"
    study_file.write_text(STUDY_TOML.replace("replications = 6", "replications = 40"))
    process = subprocess.Popen([sys.executable, str(tmp_path / "runner.py"), str(study_file), str(store)],
                               stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    workers = set()
    try:
        deadline = time.monotonic() + 240
        while count_rows(store) < 1 and process.poll() is None and time.monotonic() < deadline:
            workers |= children_of(process.pid)
            time.sleep(0.05)
        workers |= children_of(process.pid)
        assert process.poll() is None, process.stderr.read().decode()
        assert count_rows(store) >= 1, "no replication stored within 240 s"
        assert len(workers) >= 2, workers  # two pool workers (and the resource tracker)
        os.kill(process.pid, signal.SIGKILL)
        process.wait(timeout=30)
        # Bounded wait for the orphans to end (a watchdog checks every 0.5 s; the kernel's
        # parent-death signal is immediate); not a speed requirement.
        deadline = time.monotonic() + 30
        while any(alive(pid) for pid in workers) and time.monotonic() < deadline:
            time.sleep(0.1)
        left = sorted(pid for pid in workers if alive(pid))
    finally:
        if process.poll() is None:
            os.kill(process.pid, signal.SIGKILL)
            process.wait()
        for pid in workers:
            if alive(pid):
                os.kill(pid, signal.SIGKILL)
    assert not left, f"processes of the killed runner still running: {left}"
    assert count_rows(store) >= 1  # the store is readable after the kill


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
