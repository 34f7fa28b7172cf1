"""The filtered factor, one-step predictive densities and probability integral transforms (PITs):
:func:`filter_factor`, exact for a one-dimensional state (``method="auto"`` or ``"exact"``: the
Kalman filter or the grid filter with its backward pass, :mod:`smle.diagnostics.filtering_exact`),
or by the guided particle filter below (``method="particles"``), which stays as the check on the
exact route.

The particle filter is guided by per-period Gaussian proposals.

For a model with latent Gaussian AR(1) state ``x_t`` (transition ``p(x_t | x_{t-1})``, start
``N(init_mean, init_var)``) and observation density ``g_t(y_t | x_t)``, each period uses the
proposal

    q_t(x_t | x_{t-1})  proportional to  p(x_t | x_{t-1}) exp(b_t x_t - c_t x_t^2 / 2),

a Gaussian with closed-form moments. The kernel ``(b_t, c_t)`` is a second-order expansion of
``log g_t(y_t | x)`` about the mode of ``log g_t(y_t | x) + log N(x; init_mean, init_var)``
(a few vectorised Newton steps, curvature clipped at a small positive value). It is built from
``y_t`` alone, never from later observations, so the filter's output at ``t`` uses
``y_1..y_t`` only. With ``chi_t(x_{t-1}) = integral p(x | x_{t-1}) exp(b_t x - c_t x^2/2) dx``
(closed form) and ``W_{t-1}^i`` the normalised weights of the particles ``x_{t-1}^i``:

    v_t^i     = W_{t-1}^i chi_t(x_{t-1}^i) / exp(b_t x_t^i - c_t (x_t^i)^2 / 2)
    p(y_t | y_1..y_{t-1})  ~  sum_i v_t^i g_t(y_t | x_t^i)           (one-step predictive density)
    W_t^i     = v_t^i g_t(y_t | x_t^i) / sum_j v_t^j g_t(y_t | x_t^j)

and the sum of the log predictive densities estimates the log-likelihood (its exponential
unbiasedly; Del Moral 2004, Feynman-Kac Formulae, ch. 7; Pitt and Shephard 1999, JASA 94, on
guided proposals). The particles are resampled by systematic resampling (Kitagawa 1996, J.
Comput. Graph. Statist. 5) when the effective sample size falls below ``resample_threshold``
times the number of particles (1.0: every period), with the resampling uniform from the key.

PIT of ``y_t`` under its one-step predictive law:
``F(y_t | y_1..y_{t-1}) = integral p(x_t | y_1..y_{t-1}) F(y_t | x_t) dx_t``, with the model's
conditional CDF ``F(y_t | x_t)`` (:meth:`smle.models.base.Model.obs_cdf`). It is estimated by
``sum_i W_{t-1}^i F(y_t | x~_t^i)`` with ``x~_t^i`` drawn from the transition
``p(x_t | x_{t-1}^i)`` (the same standard normal draws as the proposal, shifted and scaled). This
is the predictive mixture itself, with no importance ratio: each term lies in [0, 1], so the
estimate is a probability and its variance is at most ``1 / (4 ESS_{t-1})``, which the ratio
form ``sum_i v_t^i F(y_t | x_t^i) / sum_i v_t^i`` (also correct) does not guarantee when the
proposal moves away from the prediction (informative realized measures). Multi-series models
give one PIT per series, each of its marginal one-step predictive law.

Everything is pure JAX: ``lax.scan`` over time, arrays over particles, one compiled program per
(model, number of particles, data shape). A state of k > 1 dimensions (a Gaussian VAR(1)) has the
same filter in k dimensions, :mod:`smle.diagnostics.filtering_multi`, which also gives its
smoothed factor per component.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from typing import Callable, Mapping

import jax
import jax.numpy as jnp
import numpy as np

from smle.errors import SmleInputError
from smle.engine.posterior import weighted_quantiles
from smle.diagnostics.filtering_exact import exact_factor
from smle.diagnostics.filtering_multi import compiled_filter_multi, smoothed_by_eis
from smle.diagnostics.particles import (  # noqa: F401 (public names of filtering)
    MIN_CURVATURE, NEWTON_STEPS, QUANTILES, FilterOutput, has_obs_cdf, systematic_ancestors,
)
from smle.exact_likelihood import EXACT_TOL, check_exact_tol, resolve_method
from smle.validation import as_key, check_integer, check_memory, checked_inputs, jax_params, memory_needed
from smle.models import Model

MIN_PARTICLES = 100


def no_state_message(model: Model) -> str:
    """Why a model without a latent state has nothing to filter, and where its PITs are."""
    return (f"model '{model.name}' has no latent state to filter (state_dim = 0); its one-step predictive "
            "densities and PITs are exact: model.log_predictive(params, y) and model.predictive_cdf(params, y)")


def proposal_kernels(model: Model, params: Mapping, data, n_steps: int = NEWTON_STEPS,
                     min_curvature: float = MIN_CURVATURE):
    """Per-period Gaussian kernels ``(b_t, c_t)``, shape (T,) each, from y_t alone.

    Newton steps to the mode of ``log g_t(y_t | x) + log N(x; init_mean, init_var)`` (the
    state's start law: the stationary law where there is one), each step bounded by two
    standard deviations of that law and with the curvature of the sum floored at the prior's,
    then ``c_t = max(-d^2 log g_t / dx^2, min_curvature)`` and ``b_t = d log g_t / dx + c_t x*``
    at the mode ``x*``. The kernel is ``exp(b_t x - c_t x^2 / 2)``.
    """
    state = model.latent(params)
    prior_mean, prior_var = state.init_mean, state.init_var
    prior_sd = jnp.sqrt(prior_var)

    def total_log_g(x):  # x: (T,); each period's term depends on its own x only
        return jnp.sum(model.log_obs_density(params, data, x[:, None]))

    def derivatives(x):
        return jax.jvp(jax.grad(total_log_g), (x,), (jnp.ones_like(x),))

    def newton(x, _):
        first, second = derivatives(x)
        gradient = first - (x - prior_mean) / prior_var
        curvature = jnp.maximum(-second, 0.0) + 1.0 / prior_var
        step = jnp.clip(gradient / curvature, -2.0 * prior_sd, 2.0 * prior_sd)
        return x + step, None

    start = jnp.asarray(model.mode_guess(params, data), float)
    mode, _ = jax.lax.scan(newton, start, None, length=n_steps)
    first, second = derivatives(mode)
    c = jnp.maximum(-second, min_curvature)
    b = first + c * mode
    return b, c


def guided_filter(model: Model, params: Mapping, y, key, n_particles: int,
                  resample_threshold=0.5) -> FilterOutput:
    """Pure JAX guided particle filter (see the module docstring); ``params`` are JAX scalars."""
    data = model.prepare(params, y)
    state = model.latent(params)
    b, c = proposal_kernels(model, params, data)
    n_periods = b.shape[0]
    with_cdf = has_obs_cdf(model)
    n_series = model.n_series
    keys = jax.random.split(key, (n_periods, 2))
    log_n = math.log(n_particles)
    threshold = resample_threshold * n_particles

    def step(carry, inputs):
        previous, log_w_previous = carry
        t, b_t, c_t, period_keys = inputs
        first = t == 0
        prior_mean = jnp.where(first, state.init_mean, state.intercept + state.phi * previous)
        prior_var = jnp.where(first, state.init_var, state.sigma_eta**2)
        shrink = 1.0 + c_t * prior_var
        shift = b_t - c_t * prior_mean
        log_chi = b_t * prior_mean - 0.5 * c_t * prior_mean**2 - 0.5 * jnp.log(shrink) \
            + 0.5 * shift**2 * prior_var / shrink
        eta = jax.random.normal(period_keys[0], (n_particles,), dtype=prior_mean.dtype)
        current = prior_mean + prior_var * shift / shrink + jnp.sqrt(prior_var / shrink) * eta
        period = model.period_data(data, t)
        log_g = model.log_obs_density(params, period, current[None, :])[0]
        log_v = log_w_previous + log_chi - (b_t * current - 0.5 * c_t * current**2)
        log_joint = log_v + log_g
        log_predictive = jax.scipy.special.logsumexp(log_joint)
        log_w = log_joint - log_predictive
        weights = jnp.exp(log_w)
        if with_cdf:
            from_prior = prior_mean + jnp.sqrt(prior_var) * eta
            cdf = model.obs_cdf(params, period, from_prior[None, :])[0].reshape(n_particles, n_series)
            pit = jnp.exp(log_w_previous) @ cdf
        else:
            pit = jnp.zeros((n_series,), dtype=log_w.dtype)
        mean = weights @ current
        sd = jnp.sqrt(weights @ (current - mean) ** 2)
        quantiles = weighted_quantiles(current, weights, QUANTILES)
        ess = 1.0 / jnp.sum(weights**2)
        resample = ess < threshold
        ancestors = systematic_ancestors(log_w, jax.random.uniform(period_keys[1], dtype=log_w.dtype))
        particles = jnp.where(resample, current[ancestors], current)
        log_w = jnp.where(resample, jnp.full_like(log_w, -log_n), log_w)
        return (particles, log_w), (mean, sd, quantiles, log_predictive, pit, ess, resample)

    init = (jnp.zeros((n_particles,)), jnp.full((n_particles,), -log_n))
    _, (mean, sd, quantiles, log_predictive, pit, ess, resampled) = jax.lax.scan(
        step, init, (jnp.arange(n_periods), b, c, keys))
    return FilterOutput(mean, sd, quantiles.T, log_predictive, pit, ess, resampled)


@functools.lru_cache(maxsize=None)
def compiled_filter(model: Model, n_particles: int) -> Callable:
    """``(params, y, key, resample_threshold) -> FilterOutput``, compiled once per data shape."""

    def run(params, y, key, resample_threshold):
        return guided_filter(model, params, y, key, n_particles, resample_threshold)

    return jax.jit(run)


FILTER_METHODS = ("auto", "exact", "particles")


@dataclasses.dataclass(frozen=True)
class FilterResult:
    """Filtered (and, for the exact method, smoothed) factor and one-step predictive quantities
    (NumPy arrays, leading dimension T).

    For a state of k > 1 dimensions every state summary (filtered_*, smoothed_*) has a trailing
    component axis, shape (T, k), in the order of ``factor_names``; for k = 1 they are (T,).

    Attributes:
      model: the model's registry name; factor_name: what the latent state is.
      method: "exact" (no simulation: the Kalman filter or the grid filter) or "particles" (the
        guided particle filter); engine: "Kalman filter", "grid filter" or "particle filter".
      loglik: sum of the log one-step predictive densities (the filter's log-likelihood: exact to
        ``error_bound`` for the exact method, a simulated estimate for particles).
      filtered_mean, filtered_sd, filtered_lower, filtered_upper: mean, standard deviation and
        5%/95% quantiles of x_t given y_1..y_t (the fields added with the exact method, from
        ``method`` on, have defaults so that older positional constructions still work).
      log_predictive: log p(y_t | y_1..y_{t-1}) per period.
      pit: PITs, shape (T, n_series), or None when the model has no conditional CDF.
      smoothed_mean, smoothed_sd, smoothed_lower, smoothed_upper: the same given y_1..y_T (exact
        method; for a k-dimensional state, the importance-weighted EIS scoring paths at the same
        parameters, :func:`smle.diagnostics.filtering_multi.smoothed_by_eis`; None for particles
        with a one-dimensional state, which the exact route smooths, and with ``smooth=False``).
      grid_size: points of the grid (0 for the Kalman filter; None for particles).
      error_bound: the exact method's accuracy estimate of ``loglik`` against a coarser grid (0 for
        the Kalman filter, exact to rounding; None for particles).
      ess: effective sample size after each period's observation; resample_count: periods after
        which the particles were resampled; n_particles, seed, resample_threshold: the particle
        filter's settings. All None for the exact method: there are no particles, every grid point
        carries its exact mass, so no effective sample size applies.
      factor_names: the name of each state component (one entry for k = 1).
    """

    model: str
    factor_name: str
    loglik: float
    filtered_mean: np.ndarray
    filtered_lower: np.ndarray
    filtered_upper: np.ndarray
    log_predictive: np.ndarray
    pit: np.ndarray | None
    ess: np.ndarray | None
    resample_count: int | None
    n_particles: int | None
    seed: int | None
    resample_threshold: float | None
    method: str = "particles"
    engine: str = "particle filter"
    filtered_sd: np.ndarray | None = None
    smoothed_mean: np.ndarray | None = None
    smoothed_sd: np.ndarray | None = None
    smoothed_lower: np.ndarray | None = None
    smoothed_upper: np.ndarray | None = None
    grid_size: int | None = None
    error_bound: float | None = None
    factor_names: tuple = ()

    @property
    def state_dim(self) -> int:
        """Dimension k of the filtered state (1: the state summaries have shape (T,))."""
        return 1 if self.filtered_mean.ndim == 1 else self.filtered_mean.shape[1]

    @property
    def simulated(self) -> bool:
        """Whether the quantities carry simulation noise (the particle filter)."""
        return self.method == "particles"


def check_filter_settings(n_particles, resample_threshold, state_dim: int = 1) -> tuple[int, float]:
    """Validate the filter's settings (``state_dim``: values per particle); return them as (int, float)."""
    check_integer("n_particles", n_particles, MIN_PARTICLES, "2000 is a good default")
    check_memory("filter", memory_needed("filter", 1, n_particles, max(state_dim, 1)), f"{n_particles} particles",
                 "n_particles", n_particles)
    if isinstance(resample_threshold, bool) or not isinstance(resample_threshold, (int, float)) \
            or not 0.0 < resample_threshold <= 1.0:
        raise SmleInputError(
            f"resample_threshold = {resample_threshold!r} is not accepted; accepted: a number in (0, 1] "
            "(resample when ESS < threshold x particles; 1 resamples every period)"
        )
    return int(n_particles), float(resample_threshold)


def resolve_filter_method(model: Model, method) -> str:
    """"exact" or "particles": ``auto`` is exact for a one-dimensional state (no simulation noise)
    and particles for a k-dimensional one, which no grid covers."""
    if method not in FILTER_METHODS:
        raise SmleInputError(f"method = {method!r} is not accepted; accepted: 'auto', 'exact' or 'particles' "
                             "(the guided particle filter)")
    if model.state_dim > 1:
        if method == "exact":
            raise SmleInputError(f"method = 'exact' needs a one-dimensional latent state; model '{model.name}' has a "
                                 f"{model.state_dim}-dimensional state, which no grid filter covers; accepted for "
                                 "this model: 'particles' or 'auto'")
        return "particles"
    if method == "particles":
        if model.transition_uses_data:
            raise SmleInputError(f"method = 'particles' is not available for model '{model.name}': its state's "
                                 "transition depends on the data (leverage), which the guided particle filter does "
                                 "not model; accepted for this model: 'exact' or 'auto'")
        return method
    return resolve_method(model, method)


def filter_factor(model, params: Mapping[str, float], y, n_particles: int = 2000, seed=0,
                  resample_threshold: float = 0.5, method: str = "auto",
                  exact_tol: float = EXACT_TOL, smooth: bool = True) -> FilterResult:
    """Filter the latent factor of ``model`` at ``params``: exactly, or with a guided particle filter.

    Args:
      model: a registered model name or a model instance.
      params: parameter values by name (natural parameterisation), e.g. a fit's ``params``.
      y: observations, shape (T,) or (T, n_series).
      n_particles: number of particles (at least 100; particles only).
      seed: non-negative integer or JAX PRNG key (the draws and resampling uniforms derive from it;
        particles only, but checked for every method).
      resample_threshold: resample when the ESS falls below this fraction of the particles.
      method: "auto" (default: "exact" for a one-dimensional state, "particles" for a state of
        k > 1 dimensions), "exact" (the Kalman filter for a linear Gaussian model, the checked grid
        filter otherwise, and the backward smoothing pass: no simulation noise; k = 1 only) or
        "particles" (the guided particle filter, the independent check on the exact route; for
        k > 1 in k dimensions, with the smoothed factor per component from one EIS run at
        ``params`` seeded by ``seed``, :mod:`smle.diagnostics.filtering_multi`).
      exact_tol: accuracy of the exact method's log-likelihood (log-likelihood units).
      smooth: for a k-dimensional state, whether to add the smoothed factor (one EIS run; False
        leaves the smoothed fields None). The exact route always smooths.

    Returns:
      A :class:`FilterResult`; its ``method`` and ``engine`` say which filter ran.

    References:
      Kitagawa (1987), JASA 82 (grid filter and smoother); Pitt and Shephard (1999), JASA 94 (guided
      and auxiliary particle filters); Kitagawa (1996), J. Comput. Graph. Statist. 5 (systematic
      resampling); Diebold, Gunther and Tay (1998), International Economic Review 39 (PITs of
      one-step predictive densities).
    """
    model, checked, y = checked_inputs(model, params, y)
    if model.state_dim == 0:
        raise SmleInputError(no_state_message(model))
    method = resolve_filter_method(model, method)
    n_particles, resample_threshold = check_filter_settings(n_particles, resample_threshold, model.state_dim)
    key = as_key(seed)
    if method == "exact":
        out = exact_factor(model, jax_params(checked), y, check_exact_tol(exact_tol), has_obs_cdf(model))
        return FilterResult(model=model.name, factor_name=model.factor_name, method="exact", ess=None,
                            resample_count=None, n_particles=None, seed=None, resample_threshold=None,
                            factor_names=model.component_names(), **out._asdict())
    return particle_result(model, checked, y, n_particles, seed, key, resample_threshold, smooth)


def particle_result(model: Model, checked, y, n_particles: int, seed, key, resample_threshold: float,
                    smooth: bool = True) -> FilterResult:
    """The guided particle filter's :class:`FilterResult` (inputs checked by :func:`filter_factor`)."""
    run = compiled_filter_multi if model.state_dim > 1 else compiled_filter
    out = run(model, n_particles)(jax_params(checked), jnp.asarray(y), key, resample_threshold)
    log_predictive = np.asarray(out.log_predictive)
    if not np.all(np.isfinite(log_predictive)):
        bad = np.flatnonzero(~np.isfinite(log_predictive))
        raise FloatingPointError(
            f"the particle filter of model '{model.name}' lost all weight at period(s) "
            f"{', '.join(str(int(i)) for i in bad[:10])}; check the data scale and the parameters"
        )
    quantiles = np.asarray(out.filtered_quantiles)
    return FilterResult(
        model=model.name,
        factor_name=model.factor_name,
        method="particles",
        engine="particle filter",
        loglik=float(log_predictive.sum()),
        filtered_mean=np.asarray(out.filtered_mean),
        filtered_sd=np.asarray(out.filtered_sd),
        filtered_lower=quantiles[0],
        filtered_upper=quantiles[1],
        log_predictive=log_predictive,
        pit=np.asarray(out.pit) if has_obs_cdf(model) else None,
        ess=np.asarray(out.ess),
        resample_count=int(np.sum(np.asarray(out.resampled))),
        n_particles=n_particles,
        seed=seed if isinstance(seed, int) else -1,
        resample_threshold=resample_threshold,
        factor_names=model.component_names(),
        **(smoothed_by_eis(model, checked, y, seed) if smooth and model.state_dim > 1 else {}),
    )
