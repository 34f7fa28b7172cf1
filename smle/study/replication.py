"""One replication of a design: simulate the data, estimate, return a row for the store.

:func:`run_replication` is a pure function of (design, master seed, replication index): it is
what every back-end runs, in this process, in a spawned worker or on a Dask worker. It never
raises for a failure of the estimator: the row then carries ``status = "failed"`` and the
error text, so that the study goes on and the failure is kept.
"""

from __future__ import annotations

import datetime
import math
import os
import socket
import sys
import threading
import time
import traceback

import numpy as np

from smle.study.spec import Design, replication_seeds


def _finite_or_none(value):
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _int_or_none(value):
    return None if value is None else int(value)


def run_replication(design: Design | dict, master_seed: int, replication: int) -> dict:
    """Simulate and estimate replication ``replication`` of ``design``.

    Returns:
      A dict with the key (``design``, ``replication``), the seeds, ``status`` (``"ok"`` or
      ``"failed"``), fit facts (loglik, nse, converged, iterations, ..., exact_loglik: the
      exact log-likelihood at the estimate where the state is one-dimensional), per-parameter
      ``estimates`` (truth, estimate, std_error, lower, upper, simulation_std_error), timing
      and the software version. Non-finite numbers are ``None``.
    """
    import smle

    if isinstance(design, dict):
        design = Design.from_dict(design)
    data_seed, eis_seed = replication_seeds(master_seed, design, replication)
    row = {
        "design": design.name, "replication": int(replication), "data_seed": data_seed, "eis_seed": eis_seed,
        "smle_version": smle.__version__, "worker": f"{socket.gethostname()}:{os.getpid()}",
    }
    started = time.perf_counter()
    try:
        model = smle.get_model(design.model, **dict(design.model_options))
        y, _ = smle.simulate(model, design.params, design.n_periods, seed=data_seed)
        e = design.estimator
        result = smle.fit(model, y, n_draws=e.n_draws, seed=eis_seed, antithetic=e.antithetic,
                          start=dict(design.params) if e.start == "truth" else None, tol=e.tol,
                          max_iter=e.max_iter, max_steps=e.max_steps, gtol=e.gtol, n_seeds=e.n_seeds,
                          level=e.level, method=getattr(e, "method", "eis"))
    except Exception as error:  # noqa: BLE001 - a failed replication is a result to keep
        row.update(status="failed", error=f"{type(error).__name__}: {error}\n{traceback.format_exc(limit=-3)}",
                   elapsed_seconds=time.perf_counter() - started, estimates=[])
    else:
        simulation = result.simulation_std_errors or {}
        row.update(
            status="ok", error=None,
            loglik=_finite_or_none(result.loglik), nse=_finite_or_none(result.nse),
            converged=bool(result.converged), message=result.message, iterations=int(result.iterations),
            n_evaluations=int(result.n_evaluations), grad_norm=_finite_or_none(result.grad_norm),
            eis_iterations=_int_or_none(result.eis.get("iterations")), eis_converged=result.eis.get("converged"),
            ess=_finite_or_none(result.eis.get("ess")), level=float(result.level),
            exact_loglik=_finite_or_none(result.loglik if result.method == "exact"
                                         else result.eis.get("exact_loglik_at_estimate")),
            fit_seconds=float(result.elapsed_seconds), elapsed_seconds=time.perf_counter() - started,
            estimates=[
                {"parameter": name, "truth": float(design.params[name]),
                 "estimate": _finite_or_none(result.params[name]),
                 "std_error": _finite_or_none(result.std_errors[name]),
                 "lower": _finite_or_none(result.conf_int[name][0]),
                 "upper": _finite_or_none(result.conf_int[name][1]),
                 "simulation_std_error": _finite_or_none(simulation[name]) if name in simulation else None}
                for name in result.param_names
            ],
        )
    row["finished_at"] = datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")
    return row


def run_batch(design: dict, master_seed: int, replications: list) -> list:
    """Several replications of one design in one call (one task for a worker)."""
    return [run_replication(design, master_seed, r) for r in replications]


def warm_up() -> None:
    """Worker initialiser: import smle (float64, compilation cache) before the first task."""
    import smle  # noqa: F401

    np.seterr(all="ignore")


def pool_worker_start(runner_pid: int, check_every: float = 0.5) -> None:
    """Initialiser of a local pool worker: :func:`warm_up`, then end the worker when its runner dies.

    A SIGKILLed runner cannot shut its pool down, and its spawned workers (each holding JAX,
    hundreds of MB) would otherwise run on as orphans. Two guards: on Linux the kernel sends
    SIGKILL to the worker when its parent ends (``prctl(PR_SET_PDEATHSIG)``); everywhere, a
    daemon thread checks every ``check_every`` seconds that the parent is still ``runner_pid``
    (an orphan is re-parented) and ends the process with ``os._exit``. A worker never touches
    the store, so nothing is lost that the runner had not already committed.
    """
    if sys.platform.startswith("linux"):
        try:
            import ctypes
            import signal

            pr_set_pdeathsig = 1
            ctypes.CDLL(None, use_errno=True).prctl(pr_set_pdeathsig, int(signal.SIGKILL), 0, 0, 0)
        except (OSError, AttributeError):  # no libc symbol: the watchdog thread still guards
            pass
    threading.Thread(target=_watch_runner, args=(runner_pid, check_every), name="smle-runner-watchdog",
                     daemon=True).start()
    warm_up()


def _watch_runner(runner_pid: int, check_every: float) -> None:
    while os.getppid() == runner_pid:
        time.sleep(check_every)
    os._exit(70)
