"""Exact likelihood for a one-dimensional Gaussian AR(1) state by filtering on a grid.

The filtering recursion (Kitagawa 1987, JASA 82, 1032-1041) is carried on a uniform grid
``x_1 < ... < x_G`` of spacing ``h``. With cell masses ``m_t(j)`` of the filtered law,

    predicted:   p_t(i) = sum_j K_t(i, j) m_{t-1}(j),   K_t(i, j) ~ N(x_i; mean_t(x_j), sd_t(x_j)^2)
    predictive:  l_t    = sum_i p_t(i) g_t(y_t | x_i)
    filtered:    m_t(i) = p_t(i) g_t(y_t | x_i) / l_t

and ``log L = sum_t log l_t``; ``p_1(i) ~ N(x_i; init_mean, init_var)`` normalised to one. Each
column of ``K_t`` is normalised to sum to one, so the discrete chain conserves mass exactly: the
unnormalised trapezoid weights ``h N(.)`` sum to ``1 + 2 exp(-2 pi^2 sd^2 / h^2) cos(...)``, an
aliasing error that moves with the grid (its phase is set by ``(1 - phi) x_j``, nearly the same on
a shifted grid) and that adds up over periods; normalising removes it and leaves errors of the
same geometric order in ``sd / h`` but far smaller (measured: sv, phi = 0.995, T = 2000,
h = 1.38 sd: 0.11 before, 6e-3 after; h = 0.92 sd: 3e-8).

The narrowest local width of the filtered law is bounded below by ``w = 1 / sqrt(1 / sd^2 +
kappa)``, with ``sd`` the transition standard deviation and ``kappa`` the largest curvature
``-d^2 log g_t / dx^2`` where the state has mass (its mean under each period's
single-period posterior, then its 90% quantile over periods), because the log of a Gaussian mixture with
component variance ``sd^2`` has curvature at least ``-1 / sd^2``.

How the grid is chosen (:func:`choose_grid`, in Python on concrete values, before compiling):

* its range covers the stationary law (+- 8 sd) and, for every period, where the single-period
  posterior ``N(x; init_mean, init_var) g_t(x)`` is within 36 nats (2e-16) of its maximum,
  found on a probe grid over +- 40 stationary sd; so the data decide how far into the tails it
  reaches (a GARCH mixing state at 9-12 sd on index returns); after the filter has run, the
  filtered mass in the two outermost points on each side must stay below 1e-13 at every period,
  else the range is widened by half;
* its spacing is ``w / 1.25``; its size the next of :data:`SIZES` (powers of two and 1.5 times
  them, so few shapes are compiled), the spare points refining the spacing; one needing over 1.5
  ``max_size`` is refused at once (:class:`GridOutgrown`: points needed grow like 1 / transition sd);
* for large grids whose transition is time-invariant, the transition is applied as a band of
  ``2 B + 1`` entries per row around ``x_j = (x_i - intercept) / phi`` (``B`` from a 10 sd
  reach), not as a dense G x G matrix: this keeps phi = 0.999 with a small innovation scale
  affordable.

How the accuracy is checked (:func:`exact_filter`): the likelihood is recomputed on a coarser
grid over the same range (the next smaller size, spacing 1.33-1.5 times larger) and
``error_bound = sum_t |log l_t - log l_t(coarse)|`` is reported. The error falls geometrically in
``1 / h^2``, so the coarse grid's error dominates the difference, which is then an upper estimate
of the fine grid's error (common practice for geometrically convergent rules; the tests check it
against a much finer grid). A half-cell shift is NOT a valid check here (measured: it reported
1e-12 where the error was 0.11), because the aliasing moves with the grid. If the bound exceeds
the tolerance the next size is tried, up to ``max_size`` points; past it a
:class:`~smle.errors.SmleInputError` states the accuracy reached.

A time-varying transition (data-dependent, as in leverage models, where the mean of x_t given
x_{t-1} depends on y_{t-1}) is given as :class:`PeriodTransition` arrays on the grid: the mean and
standard deviation of x_{t+1} given x_t = x_j and the data of period t, for t = 1..T-1.

This module knows nothing about models: callers pass the latent coefficients, the observation
log density on the grid (an array, or for grid choice a function of a (T, S) array of states),
and optionally the per-period transition.
"""

from __future__ import annotations

import functools
import math
from typing import Callable, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine.latent import LatentAR1
from smle.errors import SmleInputError

COARSE_SIZES = (24, 32, 48, 64, 96, 128, 192, 256, 384, 512, 768, 1024, 1536, 2048, 3072, 4096)
CELLS_PER_WIDTH = 1.25
SIZES = COARSE_SIZES[1:]
TAIL_NATS = 36.0
PROBE_SDS = 40.0
PROBE_POINTS = 161
STATIONARY_SDS = 8.0
BAND_REACH_SDS = 10.0
BAND_MIN_SIZE = 512
EDGE_MASS_TOL = 1e-13
OUTGROWN_FACTOR = 1.5
"""Refuse (:class:`GridOutgrown`) a transition sd needing more than this times ``max_size`` points:
capped, the spacing would exceed 1.2 sds, where the accuracy misses any tol below about 1e-4 (module
docstring; sv on MASS::SP500, phi 0.995, sigma_eta 0.07: 227 points needed, 0.066 reached on 192)."""
LOG_2PI = math.log(2.0 * math.pi)


class GridOutgrown(SmleInputError):
    """The transition's sd needs more than :data:`OUTGROWN_FACTOR` times ``max_size`` points (sv-leverage
    at |delta| near 1); raised before any large grid runs (experiments/results/leverage_edge.md)."""

    def __init__(self, message: str, transition_sd: float, needed: int):
        super().__init__(message)
        self.transition_sd, self.needed = transition_sd, needed


class ExactGrid(NamedTuple):
    """A uniform grid: ``size`` points from ``lower`` to ``upper``; ``band`` is the half-width in
    points of a banded transition (0: dense). ``size`` and ``band`` are static (compiled shapes)."""

    lower: float
    upper: float
    size: int
    band: int

    @property
    def spacing(self) -> float:
        return (self.upper - self.lower) / (self.size - 1)

    def points(self, shift: float = 0.0) -> jax.Array:
        """The grid points, optionally shifted by ``shift`` cells."""
        return self.lower + (jnp.arange(self.size) + shift) * self.spacing


class PeriodTransition(NamedTuple):
    """A per-period transition on the grid: x_{t+1} | x_t = x_j ~ N(mean[t, j], sd[t, j]^2).

    Shapes: ``mean`` (T - 1, G); ``sd`` (T - 1, G) or (T - 1,). Row t is the transition from
    period t to t + 1 (0-based) and may depend on the data of period t.
    """

    mean: jax.Array
    sd: jax.Array


class ExactFilterOutput(NamedTuple):
    """Exact-likelihood results.

    Attributes:
      loglik: log L (scalar).
      log_predictive: log l_t = log p(y_t | y_1..y_{t-1}), shape (T,).
      filtered_mean, filtered_sd: moments of x_t given y_1..y_t, shape (T,).
      grid: the grid points, shape (G,).
      size: G.
      error_bound: sum_t |log l_t - log l_t on the next coarser grid| (see the module
        docstring); an upper estimate of the discretisation error of ``loglik``.
      edge_mass: the largest filtered mass in the two outermost points on either side.
      spec: the :class:`ExactGrid` used.
    """

    loglik: jax.Array
    log_predictive: jax.Array
    filtered_mean: jax.Array
    filtered_sd: jax.Array
    grid: jax.Array
    size: int
    error_bound: float
    edge_mass: float
    spec: ExactGrid


# ---------------------------------------------------------------------------------------------
# the compiled recursion


def _log_normal(x, mean, var):
    return -0.5 * (LOG_2PI + jnp.log(var) + (x - mean) ** 2 / var)


def _dense_kernel(grid, mean, sd, spacing):
    """K(i, j) proportional to N(x_i; mean_j, sd_j^2), columns summing to one: mass at x_j moved to x_i.

    Normalised in logs (a column's log-sum-exp): a column whose mean lies far off the grid (a
    leverage transition at the grid's edge) has every density underflow, and dividing by its tiny
    sum gave a NaN gradient (its square underflows); in logs its mass goes to the nearest points,
    where the filtered mass is negligible anyway (the edge-mass check watches it)."""
    log_kernel = _log_normal(grid[:, None], mean[None, :], (sd**2)[None, ...] if jnp.ndim(sd) else sd**2)
    return jnp.exp(log_kernel - jax.scipy.special.logsumexp(log_kernel, axis=0, keepdims=True))


def _band_operator(grid, intercept, phi, sigma_eta, spacing, band):
    """Indices and weights of a banded time-invariant transition, each of shape (G, 2 band + 1)."""
    size = grid.shape[0]
    centre = jax.lax.stop_gradient(jnp.round(((grid - intercept) / phi - grid[0]) / spacing)).astype(jnp.int32)
    raw = centre[:, None] + jnp.arange(-band, band + 1)[None, :]
    valid = (raw >= 0) & (raw < size)
    index = jnp.clip(raw, 0, size - 1)
    weight = jnp.where(valid, jnp.exp(_log_normal(grid[:, None], intercept + phi * grid[index], sigma_eta**2)), 0.0)
    column_sum = jax.ops.segment_sum(weight.ravel(), index.ravel(), num_segments=size)
    return index, weight / jnp.maximum(column_sum, 1e-300)[index]


def _edge(mass):
    return jnp.maximum(jnp.sum(mass[:2]), jnp.sum(mass[-2:]))


def _run(grid, log_g, state: LatentAR1, transition: PeriodTransition | None, band: int, keep: bool):
    """The recursion; returns per-period (log l_t, mean, sd, edge mass[, predicted, filtered])."""
    spacing = grid[1] - grid[0]
    initial = spacing * jnp.exp(_log_normal(grid, state.init_mean, state.init_var))

    if transition is not None:
        # rematerialised: reverse mode would otherwise keep each period's G x G kernel (and its
        # log and exponential), 4 T G^2 floats: 67 GB for a leverage fit at T = 500, G = 2048
        @jax.checkpoint
        def predict(mass, row):
            mean, sd = row
            return _dense_kernel(grid, mean, sd, spacing) @ mass
        rows = (transition.mean, transition.sd)
    elif band:
        index, weight = _band_operator(grid, state.intercept, state.phi, state.sigma_eta, spacing, band)

        def predict(mass, _):
            return jnp.sum(weight * mass[index], axis=1)
        rows = None
    else:
        kernel = _dense_kernel(grid, state.intercept + state.phi * grid, state.sigma_eta, spacing)

        def predict(mass, _):
            return kernel @ mass
        rows = None

    def update(predicted, log_g_t):
        shift = jax.lax.stop_gradient(jnp.max(log_g_t))
        joint = predicted * jnp.exp(log_g_t - shift)
        total = jnp.sum(joint)
        filtered = joint / total
        mean = jnp.dot(filtered, grid)
        sd = jnp.sqrt(jnp.maximum(jnp.dot(filtered, (grid - mean) ** 2), 0.0))
        out = (jnp.log(total) + shift, mean, sd, _edge(filtered))
        return filtered, out + ((predicted, filtered) if keep else ())

    def step(mass, inputs):
        log_g_t, row = inputs
        return update(predict(mass, row), log_g_t)

    first_mass, first = update(initial, log_g[0])
    _, rest = jax.lax.scan(step, first_mass, (log_g[1:], rows))
    return tuple(jnp.concatenate([a[None], b]) for a, b in zip(first, rest))


@functools.partial(jax.jit, static_argnames=("band",))
def _loglik_parts(grid, log_g, state, transition, band):
    log_pred, mean, sd, edge = _run(grid, log_g, state, transition, band, keep=False)
    return log_pred, mean, sd, jnp.max(edge)


def loglik_on_grid(state: LatentAR1, log_g: jax.Array, spec: ExactGrid,
                   transition: PeriodTransition | None = None, shift: float = 0.0) -> jax.Array:
    """log L on a fixed grid: a smooth function of ``state`` and ``log_g`` (use it under jax.grad,
    jax.hessian or jax.jit). ``log_g`` is log g_t(y_t | x_i) at ``spec.points(shift)``, shape
    (T, G). The grid is not checked here: choose it with :func:`choose_grid`/:func:`exact_filter`."""
    grid = spec.points(shift)
    return jnp.sum(_loglik_parts(grid, log_g, state, transition, spec.band if transition is None else 0)[0])


# ---------------------------------------------------------------------------------------------
# choosing and checking the grid (Python, concrete values)


def _concrete_state(state: LatentAR1) -> LatentAR1:
    try:
        return LatentAR1(*(float(np.asarray(v)) for v in state))
    except (jax.errors.ConcretizationTypeError, jax.errors.TracerArrayConversionError, TypeError) as err:
        raise SmleInputError("the exact method chooses its grid from concrete parameter values; "
                             "call it outside jax.jit/grad and differentiate loglik_on_grid") from err


def _check_state(state: LatentAR1) -> None:
    if not (abs(state.phi) < 1.0 and math.isfinite(state.init_var) and state.init_var > 0):
        raise SmleInputError(
            f"the exact method needs a stationary latent state; got phi = {state.phi!r}, init_var = "
            f"{state.init_var!r} (accepted: |phi| < 1 and a finite positive initial variance; use "
            "smle.reference.kalman_filter for a random-walk linear Gaussian model)")
    if not state.sigma_eta > 0:
        raise SmleInputError(f"sigma_eta = {state.sigma_eta!r} is not accepted; accepted: > 0")


def log_g_and_curvature(log_obs: Callable[[jax.Array], jax.Array], x: jax.Array):
    """``(log g, -d^2 log g / dx^2)`` at states x of shape (T, S), for :func:`choose_grid` (log g is
    elementwise in x, so the Hessian-vector product with ones is its diagonal)."""
    def total(z):
        return jnp.sum(log_obs(z))
    return log_obs(x), -jax.jvp(jax.grad(total), (x,), (jnp.ones_like(x),))[1]


def choose_grid(state: LatentAR1, log_obs: Callable[[jax.Array], jax.Array], n_periods: int,
                transition_sd: float | None = None, refine: int = 1, max_size: int = SIZES[-1],
                curvature_probe: Callable | None = None) -> ExactGrid:
    """The grid for a state and data (see the module docstring).

    Args:
      state: the latent AR(1) coefficients (concrete scalars).
      log_obs: x of shape (T, S) -> log g_t(y_t | x), shape (T, S), elementwise in x (JAX).
      n_periods: T.
      transition_sd: the smallest transition standard deviation of a per-period transition
        (default: ``state.sigma_eta``).
      refine: divide the spacing by this factor (the accuracy loop doubles it).
      max_size: the largest grid allowed; a grid needing more than :data:`OUTGROWN_FACTOR` times it
        raises :class:`GridOutgrown`, a smaller excess is capped and left to the accuracy check.
      curvature_probe: x -> :func:`log_g_and_curvature` of ``log_obs`` at x, compiled by the caller (default:
        compiled here, once per call).
    """
    state = _concrete_state(state)
    _check_state(state)
    mean0, sd0 = state.init_mean, math.sqrt(state.init_var)
    probe = mean0 + sd0 * np.linspace(-PROBE_SDS, PROBE_SDS, PROBE_POINTS)
    states = jnp.broadcast_to(jnp.asarray(probe), (n_periods, PROBE_POINTS))

    if curvature_probe is None:
        curvature_probe = jax.jit(functools.partial(log_g_and_curvature, log_obs))
    centre_finite, low, high, kappa = (float(v) for v in _probe_summary(*curvature_probe(states), jnp.asarray(probe),
                                                                          mean0, sd0))
    if not centre_finite:
        raise SmleInputError("the observation log density is not finite at the state's mean for some periods")
    probe_step = probe[1] - probe[0]
    lower = min(low - probe_step, mean0 - STATIONARY_SDS * sd0)
    upper = max(high + probe_step, mean0 + STATIONARY_SDS * sd0)
    sd_min = state.sigma_eta if transition_sd is None else float(transition_sd)
    width = 1.0 / math.sqrt(1.0 / sd_min**2 + kappa)
    spacing = width / (CELLS_PER_WIDTH * refine)
    # counted from the transition sd alone: a kernel narrower than the spacing is never resolved
    needed = (upper - lower) / (sd_min / CELLS_PER_WIDTH) + 1
    if needed > OUTGROWN_FACTOR * max_size:
        raise GridOutgrown(
            f"the exact grid would need about {needed:.0f} points (more than {OUTGROWN_FACTOR:g} times max_size = "
            f"{max_size}): the state's transition standard deviation is {sd_min:.3g} on a range of {upper - lower:.3g}; near "
            "zero (a leverage correlation near +-1) the state is almost deterministic given the data. Accepted: a larger "
            "transition sd, a larger max_size, or method='eis', which needs no grid", sd_min, int(needed))
    return _grid_for(lower, upper, spacing, state, max_size, transition_sd is not None)


@jax.jit
def _probe_summary(log_g, curvature, probe, mean0, sd0):
    """From log g and its curvature on the probe grid (T, S): whether log g is finite at the
    state's mean in every period; the range of states where some period's single-period posterior
    is within TAIL_NATS of its maximum; and the curvature where that posterior has its mass (its
    posterior mean per period, then the 90% quantile over periods: outliers alone would double
    the grid; the accuracy check catches what this rough guide misses)."""
    centre_finite = jnp.all(jnp.isfinite(log_g[:, PROBE_POINTS // 2]))
    log_q = jnp.where(jnp.isfinite(log_g), log_g, -jnp.inf) - 0.5 * ((probe - mean0) / sd0) ** 2
    top = jnp.max(log_q, axis=1, keepdims=True)
    covered = jnp.any(log_q >= top - TAIL_NATS, axis=0)
    low = jnp.min(jnp.where(covered, probe, jnp.inf))
    high = jnp.max(jnp.where(covered, probe, -jnp.inf))
    finite = jnp.isfinite(curvature)
    weight = jnp.exp(log_q - top) * finite
    weighted = jnp.sum(weight * jnp.where(finite, jnp.maximum(curvature, 0.0), 0.0), axis=1)
    kappa = jnp.quantile(weighted / jnp.maximum(jnp.sum(weight, axis=1), 1e-300), 0.9)
    return centre_finite, low, high, kappa


def _grid_for(lower, upper, spacing, state, max_size, time_varying) -> ExactGrid:
    needed = (upper - lower) / spacing + 1
    # beyond max_size the largest allowed grid is used and the accuracy check reports what it reaches
    allowed = [s for s in SIZES if s <= max_size] or [SIZES[0]]
    size = next((s for s in allowed if s >= needed), allowed[-1])
    return ExactGrid(float(lower), float(upper), size, _band_for(size, (upper - lower) / (size - 1), state, time_varying))


def _band_for(size, spacing, state, time_varying) -> int:
    """Half-width of a banded transition (10 sd of reach), or 0 where a dense one is cheaper."""
    if time_varying or abs(state.phi) <= 0.05:
        return 0
    half = math.ceil(BAND_REACH_SDS * state.sigma_eta / (abs(state.phi) * spacing)) + 1
    # a gather inside the scan costs several times a dense matrix-vector product per entry
    # (measured at G = 192: dense 35 ms, band of 43 50 ms at T = 2000), so band only large grids
    return half if size >= BAND_MIN_SIZE and 2 * half + 1 <= size // 4 else 0


def exact_filter(state: LatentAR1, log_obs: Callable[[jax.Array], jax.Array], n_periods: int, tol: float = 1e-6,
                 transition: Callable[[jax.Array], PeriodTransition] | None = None,
                 max_size: int = SIZES[-1], spec: ExactGrid | None = None,
                 curvature_probe: Callable | None = None,
                 progress: Callable[[str], None] | None = None) -> ExactFilterOutput:
    """The exact log-likelihood with an automatic, checked grid.

    Args:
      state: latent AR(1) coefficients (concrete); its initial law starts the recursion and, without
        ``transition``, its coefficients give the transition.
      log_obs: x of shape (T, S) -> log g_t(y_t | x) of shape (T, S) (JAX, elementwise in x).
      n_periods: T.
      tol: the accuracy required of ``loglik`` (absolute, log-likelihood units).
      transition: optional grid -> :class:`PeriodTransition` for a time-varying transition.
      max_size: the largest grid tried.
      spec: start from this grid instead of :func:`choose_grid`'s.
      curvature_probe: passed to :func:`choose_grid`.
      progress: called with a line per grid run (size, accuracy): large dense grids take minutes.

    Raises:
      GridOutgrown: the grid needed is more than :data:`OUTGROWN_FACTOR` times ``max_size`` (raised
        before any large grid is run).
      SmleInputError: the accuracy ``tol`` is not reached within ``max_size`` points (the message
        gives the accuracy reached), or the state is not stationary.
    """
    if not (isinstance(tol, (int, float)) and tol > 0):
        raise SmleInputError(f"tol = {tol!r} is not accepted; accepted: a number > 0")
    state = _concrete_state(state)
    _check_state(state)
    transition_sd = None
    if transition is not None:
        probe = transition(jnp.linspace(state.init_mean - 8 * math.sqrt(state.init_var),
                                        state.init_mean + 8 * math.sqrt(state.init_var), 64))
        transition_sd = float(jnp.min(probe.sd))
    if spec is None:
        spec = choose_grid(state, log_obs, n_periods, transition_sd, max_size=max_size,
                           curvature_probe=curvature_probe)
    best = None
    runs = {}  # a refinement on the same range reuses the last grid's run as its coarse check

    def run_on(grid_spec):
        if grid_spec not in runs:
            grid = grid_spec.points()
            log_g = log_obs(jnp.broadcast_to(grid, (n_periods, grid_spec.size)))
            moves = None if transition is None else transition(grid)
            runs[grid_spec] = _loglik_parts(grid, log_g, state, moves, grid_spec.band if moves is None else 0)
        return runs[grid_spec]

    for _ in range(12):
        coarse = _coarser(spec, state, transition is not None)
        (log_pred, mean, sd, edge), (coarse_pred, *_rest, edge_coarse) = run_on(spec), run_on(coarse)
        edge = float(max(edge, edge_coarse))
        error = float(jnp.sum(jnp.abs(log_pred - coarse_pred)))
        if progress is not None:
            progress(f"exact grid of {spec.size} points (checked against {coarse.size}): accuracy {error:.3g}")
        if not math.isfinite(error):
            raise SmleInputError("the exact likelihood is not finite on the grid (an observation has zero "
                                 "density at every grid point); check the data and parameters")
        best = (error, spec.size)
        if edge > EDGE_MASS_TOL:
            if spec.size >= min(max_size, SIZES[-1]):
                break
            half = 0.25 * (spec.upper - spec.lower)
            spec = _grid_for(spec.lower - half, spec.upper + half, spec.spacing, state, max_size, transition is not None)
            continue
        if error <= tol:
            return ExactFilterOutput(jnp.sum(log_pred), log_pred, mean, sd, spec.points(), spec.size, error, edge, spec)
        if spec.size >= min(max_size, SIZES[-1]):
            break
        finer = min(s for s in SIZES if s > spec.size)
        spec = _grid_for(spec.lower, spec.upper, (spec.upper - spec.lower) / (finer - 1), state, max_size,
                         transition is not None)
    raise SmleInputError(
        f"the exact grid reached an accuracy of {best[0]:.3g} (log-likelihood units) with {best[1]} points "
        f"(largest filtered mass at the grid's edges {edge:.3g}), short of tol = {tol!r}; accepted: a larger "
        f"max_size (now {max_size}) or a looser tol")


def _coarser(spec, state, time_varying):
    """The same range with the next smaller size of COARSE_SIZES (the accuracy check)."""
    size = max(s for s in COARSE_SIZES if s < spec.size)
    band = _band_for(size, (spec.upper - spec.lower) / (size - 1), state, time_varying)
    return ExactGrid(spec.lower, spec.upper, size, band)


# ---------------------------------------------------------------------------------------------
# smoothing and predictive PITs (not on the likelihood fast path)


