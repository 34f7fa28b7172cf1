"""Execution back-ends: where replications run. Results always come back to the runner.

Each back-end is a context manager with ``map(tasks)``, an iterator yielding rows as they
finish (in any order). A task is ``(design_dict, master_seed, replications)``: a batch of
replications of one design, run by :func:`smle.study.replication.run_batch`. Workers never
touch the store, so every back-end gives the same numbers and the store has one writer.

* :class:`InProcess`: sequential, in this process.
* :class:`ProcessPool`: ``concurrent.futures.ProcessPoolExecutor`` with the 'spawn' start
  method (JAX is not fork-safe); its workers end when the runner dies, even by SIGKILL
  (:func:`smle.study.replication.pool_worker_start`).
* :class:`DaskCluster`: a ``distributed.Client`` on a scheduler address, or on a new
  ``LocalCluster``.
"""

from __future__ import annotations

import multiprocessing
import os
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool

from smle.errors import SmleInputError, describe
from smle.study.replication import pool_worker_start, run_batch, warm_up


class InProcess:
    """Run tasks one after another in this process."""

    name = "in-process"
    workers = 1

    def __enter__(self):
        warm_up()
        return self

    def __exit__(self, *exc):
        return False

    def map(self, tasks):
        for task in tasks:
            yield from run_batch(*task)


class ProcessPool:
    """A local pool of spawned worker processes (default: one per core)."""

    name = "process pool"

    def __init__(self, workers: int | None = None):
        if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
            raise SmleInputError(f"workers = {describe(workers)} is not accepted; accepted: an integer >= 1")
        self.workers = workers or os.cpu_count() or 1
        self.executor = None

    def __enter__(self):
        self.executor = ProcessPoolExecutor(max_workers=self.workers, mp_context=multiprocessing.get_context("spawn"),
                                            initializer=pool_worker_start, initargs=(os.getpid(),))
        return self

    def __exit__(self, kind, value, tb):
        self.executor.shutdown(wait=kind is None, cancel_futures=True)
        return False

    def map(self, tasks):
        # Keep a bounded number of tasks in flight: an interrupted study then has little queued.
        pending, tasks = set(), iter(tasks)
        limit = 2 * self.workers
        for task in tasks:
            pending.add(self.executor.submit(run_batch, *task))
            if len(pending) >= limit:
                break
        while pending:
            finished, pending = wait(pending, return_when=FIRST_COMPLETED)
            for future in finished:
                try:
                    rows = future.result()
                except BrokenProcessPool as error:
                    raise RuntimeError(
                        "a worker process of the pool died (out of memory, killed, or a script that starts a study "
                        "without an `if __name__ == '__main__':` guard, which the 'spawn' start method needs); "
                        "finished replications are stored: run the study again to resume") from error
                yield from rows
                nxt = next(tasks, None)
                if nxt is not None:
                    pending.add(self.executor.submit(run_batch, *nxt))


class DaskCluster:
    """Tasks on a Dask distributed cluster: an existing scheduler, or a new LocalCluster."""

    name = "dask"

    def __init__(self, address: str | None = None, workers: int | None = None, timeout: float = 10.0):
        try:
            import distributed  # noqa: F401
        except ImportError:
            raise SmleInputError("the Dask back-end needs the 'distributed' package: pip install 'smle[cluster]'") from None
        if address is not None and (not isinstance(address, str) or not address.strip()):
            raise SmleInputError(f"scheduler = {describe(address)} is not accepted; accepted: an address such as "
                                 "'tcp://host:8786'")
        self.address, self.timeout = address, timeout
        self.workers = workers or 2
        self.cluster = self.client = None

    def __enter__(self):
        import distributed

        if self.address is None:
            self.cluster = distributed.LocalCluster(n_workers=self.workers, threads_per_worker=1, processes=True,
                                                    dashboard_address=None)
            self.client = distributed.Client(self.cluster)
        else:
            try:
                self.client = distributed.Client(self.address, timeout=self.timeout)
            except (OSError, TimeoutError, ValueError) as error:
                raise SmleInputError(
                    f"scheduler = {self.address!r} could not be reached within {self.timeout:g} s "
                    f"({type(error).__name__}: {error}); accepted: the address of a running Dask scheduler, "
                    "e.g. 'tcp://host:8786'; nothing was run or stored") from None
            self.workers = max(1, len(self.client.scheduler_info().get("workers", {})))
        self.client.run(warm_up)
        return self

    def __exit__(self, *exc):
        if self.client is not None:
            self.client.close()
        if self.cluster is not None:
            self.cluster.close()
        return False

    def map(self, tasks):
        import distributed

        futures = [self.client.submit(run_batch, *task, pure=False) for task in tasks]
        try:
            for future in distributed.as_completed(futures):
                yield from future.result()
        finally:
            for future in futures:
                future.cancel()


def make_backend(backend: str = "pool", workers: int | None = None, scheduler: str | None = None,
                 timeout: float = 10.0):
    """A back-end by name: ``"inprocess"``, ``"pool"`` or ``"dask"`` (a scheduler address implies dask)."""
    if scheduler is not None and backend in (None, "pool", "dask"):
        return DaskCluster(scheduler, workers, timeout)
    if backend == "inprocess":
        return InProcess()
    if backend == "pool":
        return ProcessPool(workers)
    if backend == "dask":
        return DaskCluster(None, workers)
    raise SmleInputError(f"backend = {describe(backend)} is not accepted; accepted: inprocess, pool, dask")
