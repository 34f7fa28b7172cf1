"""Helpers for tests that kill a running process for real (SIGKILL: no warning, no clean-up)."""

import os
import signal
import sqlite3
import subprocess
import sys
import time


def count_rows(path, table):
    """Rows of ``table`` in the SQLite file at ``path`` (read-only; 0 while it does not exist or is not ready)."""
    if not path.exists():
        return 0
    try:
        connection = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=5)
        try:
            return connection.execute(f"SELECT COUNT(*) FROM {table}").fetchone()[0]
        finally:
            connection.close()
    except sqlite3.OperationalError:
        return 0


def sigkill_when(arguments, ready, timeout=120.0):
    """Start ``python arguments...``, SIGKILL it as soon as ``ready()`` holds (it must still be
    running then), and return the process; a process that ends or fails first fails the test."""
    process = subprocess.Popen([sys.executable, *arguments], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + timeout
        while not ready() and process.poll() is None and time.monotonic() < deadline:
            time.sleep(0.05)
        assert process.poll() is None, process.stderr.read().decode()
        os.kill(process.pid, signal.SIGKILL)
        process.wait(timeout=30)
    finally:
        if process.poll() is None:
            os.kill(process.pid, signal.SIGKILL)
            process.wait()
    assert process.returncode == -signal.SIGKILL
    return process
