"""Input checks shared by every entry point (loglik, simulate, fit, check, filter_factor, diagnose,
the grid reference and the study designs): each check is written once, here.

Every check raises :class:`~smle.errors.SmleInputError` naming the argument, the value and
what is accepted.
"""

from __future__ import annotations

import math
import os
from typing import Mapping

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine import eis, eis_multi
from smle.engine.control import CONTROL_VARIATES, ControlSpec
from smle.errors import SmleInputError, describe
from smle.models import Model, get_model
from smle.params import check_params

MIN_DRAWS = 4
MAX_SEED = 2**63 - 1
"""The largest seed: ``jax.random.PRNGKey`` takes a signed 64-bit integer in float64 mode."""

# Peak memory per stored value, bytes, measured with the peak resident set size (ru_maxrss) of
# a fresh process against a smaller run (sv at T = 200 and 800, S = 4096 to 65536; sv-2factor
# at T = 200 and 800, S = 8192): loglik 35-38 per period, path and state dimension of each draw
# set, fit 80 (the gradient keeps the EIS iterations' arrays), simulate 24 per period and series
# or state component; the particle filter 54-74 per particle at N = 1e6 and 1e7 (T = 200 and 800:
# its scan keeps one period's particles, so T hardly matters). Rounded up.
BYTES_PER_VALUE = {"loglik": 40, "fit": 85, "simulate": 28, "filter": 80}
FALLBACK_MEMORY = 8 * 2**30
"""Memory assumed available when the system does not say (no /proc/meminfo, no sysconf)."""


def check_integer(name: str, value, minimum: int, note: str = "", even: bool = False) -> int:
    """``value`` as an int if it is an integer (not a bool) >= ``minimum``; ``even``: draws in
    antithetic pairs. ``note`` is added to the message in parentheses."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise SmleInputError(f"{name} = {describe(value)} is not accepted; accepted: an integer >= {minimum}"
                             + (f" ({note})" if note else ""))
    if even and value % 2:
        raise SmleInputError(
            f"{name} = {value} must be even with antithetic draws (pairs); use an even number or antithetic=False"
        )
    return int(value)


def check_observations(model: Model, y) -> np.ndarray:
    """Validate observations for ``model``: real numbers (not text, not complex), finite, right
    shape, long enough, and returns rather than prices where the model expects returns."""
    array = _real_array(model, y)
    expected = "(T,)" if model.n_series == 1 else f"(T, {model.n_series})"
    if model.n_series == 1 and array.ndim == 2 and array.shape[1] == 1:
        array = array[:, 0]
    if (model.n_series == 1 and array.ndim != 1) or (
        model.n_series > 1 and (array.ndim != 2 or array.shape[1] != model.n_series)
    ):
        raise SmleInputError(
            f"y has shape {array.shape}; model '{model.name}' expects shape {expected}"
        )
    if array.shape[0] < model.min_periods:
        raise SmleInputError(
            f"y has {array.shape[0]} periods; model '{model.name}' needs at least {model.min_periods}"
        )
    bad = ~np.isfinite(array)
    if bad.any():
        rows = np.flatnonzero(bad.reshape(array.shape[0], -1).any(axis=1))
        shown = ", ".join(str(int(r)) for r in rows[:10]) + (" ..." if rows.size > 10 else "")
        raise SmleInputError(
            f"y has {rows.size} non-finite value(s) (NaN or inf) at row(s) {shown}; "
            "accepted: finite numbers only (drop or fill those rows first)"
        )
    check_not_prices(model, array)
    return model.check_data(array)


def _real_array(model: Model, y) -> np.ndarray:
    """``y`` as a float array, refusing what a float conversion would silently accept or crash on:
    text (even text that reads as numbers: a column read as strings), complex numbers (whose
    imaginary parts the conversion drops) and other objects."""
    accepted = (f"accepted: real numbers, an array of shape (T,) for model '{model.name}'" if model.n_series == 1
                else f"accepted: real numbers, an array of shape (T, {model.n_series}) for model '{model.name}'")
    try:
        raw = np.asarray(y)
    except (TypeError, ValueError):
        raw = None
    if raw is not None and raw.dtype.kind in "OUSc":
        bad = [(i, v) for i, v in enumerate(raw.ravel()) if v is not None and not _is_real_number(v)]  # None: NaN
        if bad:
            unreadable = [(i, v) for i, v in bad if not _reads_as_number(v)]
            position, value = (unreadable or bad)[0]
            kind = ("text" if isinstance(value, (str, bytes)) else "complex numbers"
                    if isinstance(value, (complex, np.complexfloating)) else type(value).__name__)
            raise SmleInputError(
                f"y must be numeric observations, not {kind}: {describe(value)} at position {position} ({len(bad)} "
                f"value(s) of this kind, {len(unreadable)} not readable as a number); {accepted}"
                + (" (convert text with pandas.to_numeric or float first)" if kind == "text" else ""))
    try:
        return np.asarray(y, dtype=float)
    except (TypeError, ValueError):
        raise SmleInputError(f"y must be numeric observations; got {describe(y)}; {accepted}") from None


def _is_real_number(value) -> bool:
    """A value that is not text and converts to float (a Python or NumPy number, Decimal, ...)."""
    return not isinstance(value, (str, bytes)) and _reads_as_number(value)


def _reads_as_number(value) -> bool:
    """Whether ``float(value)`` works; never for a complex number (NumPy's would drop its imaginary part)."""
    if isinstance(value, (complex, np.complexfloating)):
        return False
    try:
        float(value)
    except (TypeError, ValueError):
        return False
    return True


def check_not_prices(model: Model, array: np.ndarray) -> None:
    """Refuse prices given to a one-series model that expects returns: all values positive with a
    lag-1 autocorrelation above 0.9 (a price level wanders; a return series is centred near 0)."""
    if not (model.expects_returns and model.n_series == 1 and array.shape[0] > 2 and np.all(array > 0)
            and np.ptp(array) > 0):  # a constant series has no autocorrelation (smle.fit refuses it as constant)
        return
    lag_one = np.corrcoef(array[1:], array[:-1])[0, 1]
    if lag_one > 0.9:
        raise SmleInputError(
            f"y looks like prices, not returns (all positive, lag-1 autocorrelation {lag_one:.3f}); "
            f"model '{model.name}' expects returns: convert with smle.data.log_returns (or "
            "--prices on the command line)"
        )


def check_settings(n_draws, antithetic, tol, max_iter, n_score_draws=None, model: Model | None = None,
                   n_periods: int | None = None, purpose: str = "loglik") -> eis.EISSettings:
    """Validate estimator settings and return them as :class:`~smle.engine.eis.EISSettings`.

    With ``model`` and ``n_periods`` the run's memory is estimated (``purpose`` "loglik" or
    "fit", :func:`memory_needed`) and a run that would not fit in memory is refused."""
    check_integer("n_draws", n_draws, MIN_DRAWS, even=antithetic)
    if n_score_draws is not None:
        check_integer("n_score_draws", n_score_draws, MIN_DRAWS, even=antithetic)
    if model is not None and n_periods is not None and model.state_dim > 0:
        scoring = int(n_draws if n_score_draws is None else n_score_draws)
        check_memory(purpose, memory_needed(purpose, n_periods, int(n_draws) + scoring, model.state_dim),
                     f"T = {n_periods} periods x ({int(n_draws)} fitting + {scoring} scoring draws) x "
                     f"{model.state_dim} state dimension(s)", "n_draws", int(n_draws))
    if not (isinstance(tol, (int, float)) and math.isfinite(tol) and tol > 0):
        raise SmleInputError(f"tol = {tol!r} is not accepted; accepted: a positive number such as 1e-6")
    check_integer("max_iter", max_iter, 1)
    score = None if n_score_draws is None or int(n_score_draws) == int(n_draws) else int(n_score_draws)
    return eis.EISSettings(n_draws=int(n_draws), antithetic=bool(antithetic), tol=float(tol), max_iter=int(max_iter),
                           n_score_draws=score)


def check_control(model: Model, control_variates, cv_coefficient="regression") -> ControlSpec:
    """Validate the control-variate choice for ``model`` and return a :class:`ControlSpec`.

    Every simulated-likelihood entry point calls this, so a model without a latent state (whose
    likelihood is exact) is turned away here with the reason."""
    if model.state_dim == 0:
        raise SmleInputError(
            f"model '{model.name}' has no latent state: its likelihood is exact (closed form), so there is no "
            "simulation and no simulation error to measure, check or reduce; use smle.loglik or smle.fit"
        )
    if control_variates is not None and model.state_dim > 1:
        raise SmleInputError(
            f"control_variates = {control_variates!r}: control variates are not yet available for a "
            f"{model.state_dim}-dimensional state (model '{model.name}'); accepted: None"
        )
    if control_variates is not None and model.transition_uses_data:
        raise SmleInputError(
            f"control_variates = {control_variates!r}: control variates are not yet available for EIS over two "
            f"consecutive states (model '{model.name}', whose transition uses the data); accepted: None"
        )
    if control_variates not in CONTROL_VARIATES:
        raise SmleInputError(
            f"control_variates = {control_variates!r} is not accepted; accepted: "
            + ", ".join(repr(c) for c in CONTROL_VARIATES)
        )
    independent = control_variates in ("independent", "both")
    if independent and not model.has_independent_case:
        raise SmleInputError(
            f"control_variates = {control_variates!r}: model '{model.name}' has no independent-factor case "
            "(its state is not stationary, so there is no autocorrelation to set to zero); "
            "use control_variates='draws'"
        )
    if isinstance(cv_coefficient, str) and cv_coefficient == "regression":
        coefficient = None
    elif isinstance(cv_coefficient, (int, float, np.floating)) and not isinstance(cv_coefficient, bool) \
            and math.isfinite(cv_coefficient):
        coefficient = float(cv_coefficient)
    else:
        raise SmleInputError(
            f"cv_coefficient = {cv_coefficient!r} is not accepted; accepted: 'regression' (the slope of the log "
            "weights on the independent case's log weights, from this run) or a finite number such as 1.0"
        )
    return ControlSpec(independent=independent, draws=control_variates in ("draws", "both"), coefficient=coefficient)


def check_state_settings(model: Model, settings: eis.EISSettings) -> None:
    """For a k-dimensional state (k > 1): the model's regression basis is valid and both draw
    sets identify it (:func:`smle.engine.eis_multi.check_draws`); for a transition that uses the
    data, that the fitting draws identify the regression on the pair of consecutive states."""
    k = model.state_dim
    if k == 1 and model.transition_uses_data:
        try:
            eis_multi.check_draws(settings.n_draws, 2, eis_multi.full_pairs(2), settings.antithetic)
        except SmleInputError as error:
            raise SmleInputError(f"{error} (model '{model.name}': EIS over two consecutive states regresses on "
                                 "the pair (x_{t-1}, x_t), as for a 2-dimensional state)") from None
    if k <= 1:
        return
    pairs = eis_multi.check_pairs(model.pairs() or eis_multi.full_pairs(k), k)
    eis_multi.check_draws(settings.n_draws, k, pairs, settings.antithetic)
    if settings.n_score_draws is not None:
        eis_multi.check_draws(settings.n_score_draws, 0, (), settings.antithetic)


def checked_params(model: Model, params) -> dict[str, float]:
    """``params`` checked against the model's constraints and joint constraints (floats by name)."""
    checked = check_params(model.name, model.constraints(), params)
    model.check_joint(checked)
    return checked


def checked_inputs(model, params, y):
    """Resolve the model and validate its parameters and data: ``(model, params, y)``."""
    model = get_model(model)
    return model, checked_params(model, params), check_observations(model, y)


def jax_params(checked: Mapping[str, float]) -> dict:
    """Checked parameters as float64 JAX scalars (traced, so new values reuse compiled code)."""
    return {k: jnp.asarray(v, float) for k, v in checked.items()}


def check_seed(seed, count: int = 1) -> int:
    """``seed`` as an int if it is an integer in [0, MAX_SEED]; ``count`` seeds ``seed .. seed +
    count - 1`` are used (several fits or runs), so the last must be a seed too."""
    accepted = f"accepted: an integer from 0 to 2**63 - 1 = {MAX_SEED}, or a JAX PRNG key"
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or not 0 <= seed <= MAX_SEED:
        raise SmleInputError(f"seed = {describe(seed)} is not accepted; {accepted}")
    if seed > MAX_SEED - (count - 1):
        raise SmleInputError(f"seed = {seed} is not accepted: seeds {seed} to {seed} + {count - 1} are used (one per "
                             f"run) and the last must be a seed too; accepted: an integer from 0 to "
                             f"{MAX_SEED - (count - 1)}")
    return int(seed)


def as_key(seed, count: int = 1) -> jax.Array:
    """A JAX PRNG key from an integer seed (or a key, returned as it is); see :func:`check_seed`."""
    if isinstance(seed, (jax.Array, np.ndarray)) and jnp.issubdtype(jnp.asarray(seed).dtype, jnp.unsignedinteger):
        return jnp.asarray(seed)
    return jax.random.PRNGKey(check_seed(seed, count))


def check_periods(model: Model, n_periods) -> int:
    """The number of periods to simulate from ``model``: an integer >= 1 whose arrays fit in memory."""
    n_periods = check_integer("n_periods", n_periods, 1)
    values = model.n_series + max(model.state_dim, 1)
    check_memory("simulate", memory_needed("simulate", n_periods, 1, values), f"{n_periods} periods", "n_periods", n_periods)
    return n_periods


def memory_needed(purpose: str, n_periods: int, n_paths: int, width: int) -> int:
    """Estimated peak memory in bytes of a run: ``BYTES_PER_VALUE[purpose]`` per period, path
    and value per path (the state dimension; for ``simulate``, series plus state components; for
    ``filter``, per particle, with ``n_periods`` and ``width`` 1)."""
    return BYTES_PER_VALUE[purpose] * int(n_periods) * int(n_paths) * int(width)


def available_memory() -> tuple[int, str]:
    """Memory this process can still use, in bytes, and where the figure comes from: the least of
    MemAvailable (/proc/meminfo) and a cgroup (v2) memory limit; else free, or else total,
    physical pages (sysconf); else :data:`FALLBACK_MEMORY`."""
    found = []
    try:
        with open("/proc/meminfo") as meminfo:
            for line in meminfo:
                if line.startswith("MemAvailable:"):
                    found.append((int(line.split()[1]) * 1024, "MemAvailable in /proc/meminfo"))
    except (OSError, ValueError, IndexError):
        pass
    try:  # the container's limit (its usage is not subtracted: it counts page cache that can be freed)
        with open("/sys/fs/cgroup/memory.max") as limit:
            found.append((int(limit.read()), "the cgroup memory limit"))
    except (OSError, ValueError):  # no cgroup v2, or no limit ("max")
        pass
    for pages, source in (("SC_AVPHYS_PAGES", "free physical pages"), ("SC_PHYS_PAGES", "total physical memory")):
        if found:
            break
        try:
            found.append((os.sysconf(pages) * os.sysconf("SC_PAGE_SIZE"), source))
        except (OSError, ValueError, AttributeError):  # not every system has both names
            pass
    return min(found) if found else (FALLBACK_MEMORY, "a fixed cap (the system does not report its free memory)")


def check_memory(purpose: str, needed: int, sizes: str, argument: str, value: int) -> None:
    """Refuse a run whose estimated memory ``needed`` (bytes) exceeds what is available, before
    anything is allocated; the message gives both figures and the sizes that drive it."""
    available, source = available_memory()
    if needed > available:
        raise SmleInputError(
            f"{argument} = {value} is too large: {purpose} with {sizes} needs about {_bytes_text(needed)} of memory and {_bytes_text(available)} is "
            f"available ({source}); accepted: a smaller {argument}"
            f"{' or shorter data' if purpose in ('loglik', 'fit') else ''} whose memory fits "
            f"(about {BYTES_PER_VALUE[purpose]} bytes {_MEMORY_UNITS.get(purpose, _MEMORY_UNITS['loglik'])})")


_MEMORY_UNITS = {"loglik": "per period, path and state dimension", "simulate": "per period and simulated value",
                 "filter": "per particle"}


def _bytes_text(n_bytes: int) -> str:
    return f"{n_bytes / 2**30:.3g} GiB" if n_bytes >= 2**30 else f"{n_bytes / 2**20:.3g} MiB"
