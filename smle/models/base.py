"""The model plug-in interface, stated once.

A model is a frozen (hashable) dataclass subclassing :class:`Model`, registered by
``@smle.models.register``: the engine JIT-compiles once per (model, data shape) and treats the
model instance as static. The engine takes a model instance and never imports this package.
Everything below is a pure JAX function of a parameter mapping ``params`` (name -> scalar).

Class attributes (set in the model's own module):

* ``name`` (the registry name), ``summary``, ``equations``: required;
* ``n_series`` (observed series, columns of y; default 1), ``series_labels`` (what each
  series is, for the goodness-of-fit tests; default ``("return",)``), ``min_periods``,
  ``stationary_state``, ``expects_returns``, ``factor_name``;
* ``state_dim``: dimension of the latent state (default 1; 0 means no latent state, the
  likelihood in closed form). A model whose dimension depends on its options (``var1-noise``,
  ``factor-sv``) overrides it with a property.

Required methods:

* ``constraints()``: the admissible region of each parameter and its bijection to the real line;
* ``latent(params)``: the latent Gaussian AR(1) coefficients implied by theta;
* ``log_obs_density(params, data, x)``: log g_t(y_t | x_t) for paths ``x`` of shape (T, S);
* ``simulate(params, n_periods, key)``: observations and the latent path;
* ``start_params(y)``: sensible start values from the data.

With a k-dimensional state (``state_dim = k > 1``) the state is a Gaussian VAR(1) and
``latent`` is replaced by:

* ``latent_var(params)``: the :class:`~smle.engine.latent_var.LatentVAR1` coefficients
  (``smle.engine.latent_var.independent_ar1`` or ``stationary`` build them);
* ``log_obs_density(params, data, x)`` takes paths ``x`` of shape (T, S, k) and returns (T, S);
* ``simulate`` returns the latent path with shape (T, k), and ``mode_guess`` a (T, k) path;
* ``pairs()`` (optional): the products x_i x_j (i <= j) of the EIS regression basis; None (the
  default) is every product. Return ``smle.engine.eis_multi.diagonal_pairs(k)`` when log g_t is
  a sum over components, ``star_pairs(k, hub)`` when one common component meets every other:
  fewer regressors, fewer draws needed. The basis must cover every entry where the Hessian of
  log g_t in x_t can be non-zero.

``check``, ``filter_factor`` (a guided particle filter in k dimensions) and ``diagnose`` work for
k > 1; control variates are not yet available there (a clear error says so). ``component_names()``
names the components (default ``x1 .. xk``).

Optional hooks (each has a default here):

* ``prepare(params, y)``: data-only precomputation (a GARCH scale path, say);
* ``mode_guess(params, data)``: a rough posterior-mode path starting the EIS Newton steps;
* ``check_data(y)``, ``check_joint(params)``: model-specific checks of data and of joint
  parameter constraints (with ``to_real``/``from_real`` for a joint bijection);
* ``independent_params(params)``: the parameters with the factor autocorrelation set to zero,
  enabling the independent control variate and :meth:`Model.independent_loglik` (adaptive
  Gauss-Hermite per period, or a model's own closed form);
* ``obs_cdf(params, data, x)``: the conditional CDF, for PITs (:func:`smle.diagnose`);
* ``period_data(data, t)``: one period of prepared data, for the particle filter;
* ``pin(unconstrained, fixed)``: the unconstrained vector with fixed parameters held at their
  values (restricted fits; a model with a joint bijection overrides it).

A model without a latent state (``state_dim = 0``, e.g. ``garch``) implements instead of the
state-space methods ``loglik_closed_form(params, y)`` (the exact log-likelihood, pure JAX),
``log_predictive(params, y)`` and ``predictive_cdf(params, y)`` (per period, shape (T,)), and
``factor_path(params, y)``: the path a fit reports in place of a smoothed factor.
* ``factor_display(params, x)``: the quantity figures show for the factor (default: x itself).
* ``transition_uses_data`` with ``period_transition(params, data, grid)``: a transition that
  depends on the data (leverage), for the exact method; with ``path_transition(params, data,
  x_from)`` as well (the same law at states of any shape), EIS over two consecutive states
  (:mod:`smle.engine.eis_pairs`) covers it too; without it EIS refuses such a model;
* ``gaussian_measurement(params)``: for a linear Gaussian model, ``y_t = x_t + N(0, v)``, the
  variance ``v``; the exact method then runs the Kalman filter (default None: not linear Gaussian).
  With a k-dimensional state, the (k, k) covariance H of ``y_t = x_t + N(0, H)`` (the health
  check's Kalman reference).
* ``simulate_ahead(params, y, x_last, n_periods, key)``: paths beyond the end of the data ``y``
  from draws ``x_last`` (S,) of the state at T (``smle.forecast``); default: a clear error.

The engine knows nothing about any particular model.
"""


from __future__ import annotations

import dataclasses
from typing import ClassVar, Mapping

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine.latent import LatentAR1
from smle.engine.latent_var import LatentVAR1
from smle.errors import SmleInputError
from smle.params import Constraint


@dataclasses.dataclass(frozen=True)
class Model:
    """Base class of smle models. Subclasses set the class attributes and the methods below."""

    name: ClassVar[str] = ""
    summary: ClassVar[str] = ""
    equations: ClassVar[str] = ""
    n_series: ClassVar[int] = 1
    min_periods: ClassVar[int] = 10
    stationary_state: ClassVar[bool] = True
    expects_returns: ClassVar[bool] = False
    factor_name: ClassVar[str] = "latent state x_t"
    series_labels: ClassVar[tuple[str, ...]] = ("return",)
    """What each observed series is, in column order (its first ``n_series`` entries label the
    goodness-of-fit tests and figures): ``("return",)``, ``("observation",)``,
    ``("return", "realized measure")``."""
    transition_uses_data: ClassVar[bool] = False
    """Whether the state's transition depends on the data (leverage): then :meth:`period_transition`
    gives it and the exact method uses it; EIS runs with kernels over two consecutive states where
    the model also defines :meth:`path_transition`, and refuses the model otherwise."""
    state_dim: ClassVar[int] = 1
    """Dimension of the latent state: 1 for the AR(1) factor every model has today; 0 means no
    latent state (the likelihood in closed form); above 1 the state is the Gaussian VAR(1) of
    :meth:`latent_var` and the likelihood methods dispatch to the multivariate EIS engine."""

    # -- to be supplied by each model ---------------------------------------------------------
    def constraints(self) -> dict[str, Constraint]:
        raise NotImplementedError

    def latent(self, params: Mapping) -> LatentAR1:
        raise NotImplementedError

    def latent_var(self, params: Mapping) -> LatentVAR1:
        """The Gaussian VAR(1) state implied by theta (models with ``state_dim > 1``)."""
        raise NotImplementedError(f"model '{self.name}' has no k-dimensional state (latent_var)")

    def pairs(self):
        """Products x_i x_j (i <= j) in the EIS regression basis for k > 1; None: all of them."""
        return None

    def log_obs_density(self, params: Mapping, data, x: jax.Array) -> jax.Array:
        """log g_t(y_t | x_t) at paths x of shape (T, S) (or (T, S, k) for k > 1); returns (T, S)."""
        raise NotImplementedError

    def simulate(self, params: Mapping, n_periods: int, key: jax.Array):
        """Return ``(y, x)``: observations, shape (T,) or (T, n_series), and the latent path,
        shape (T,) (or (T, k) for k > 1)."""
        raise NotImplementedError

    def start_params(self, y: np.ndarray) -> dict[str, float]:
        raise NotImplementedError

    # -- optional hooks ----------------------------------------------------------------------
    def period_transition(self, params: Mapping, data, grid: jax.Array):
        """For a model whose transition uses the data: the law of x_{t+1} given x_t = grid[j] and the
        data of period t, as :class:`smle.engine.exact.PeriodTransition` (means (T - 1, G), sds
        (T - 1,) or (T - 1, G)); None (default): the AR(1) transition of :meth:`latent`."""
        return None

    def path_transition(self, params: Mapping, data, x_from: jax.Array):
        """For a model whose transition uses the data: the Gaussian law of x_{t+1} given x_t =
        ``x_from[t - 1]`` (shape (T - 1, S), periods t = 1..T-1) and the data of period t, as
        :class:`smle.engine.exact.PeriodTransition` (means (T - 1, S), sds (T - 1,) or (T - 1, S)).
        Defining it makes the model's likelihood available to EIS (:mod:`smle.engine.eis_pairs`)."""
        raise NotImplementedError(f"model '{self.name}' has no path_transition hook")

    @property
    def has_path_transition(self) -> bool:
        """Whether the model defines :meth:`path_transition` (EIS over two consecutive states)."""
        return type(self).path_transition is not Model.path_transition

    def gaussian_measurement(self, params: Mapping):
        """The measurement variance v of a linear Gaussian model y_t = x_t + N(0, v), or None."""
        return None

    def prepare(self, params: Mapping, y: jax.Array):
        """Data-only precomputation passed to :meth:`log_obs_density` (default: the data)."""
        return y

    def mode_guess(self, params: Mapping, data) -> jax.Array:
        """A rough path for the posterior mode of x, shape (T,) or (T, k) for k > 1 (default: the
        state's mean)."""
        n_periods = jax.tree.leaves(data)[0].shape[0]
        if self.state_dim > 1:
            mean = jnp.asarray(self.latent_var(params).init_mean, float)
            return jnp.broadcast_to(mean, (n_periods, mean.shape[0]))
        state = self.latent(params)
        return jnp.full((n_periods,), state.init_mean, dtype=jnp.result_type(float))

    def check_data(self, y: np.ndarray) -> np.ndarray:
        """Model-specific checks on validated finite data; return the data to use."""
        return y

    def check_joint(self, params: Mapping) -> None:
        """Raise :class:`~smle.errors.SmleInputError` for values that break a joint constraint.

        Called on validated user values after the per-parameter checks (default: none).
        """

    def independent_params(self, params: Mapping):
        """Parameters of the independent-factor case (autocorrelation zero), or None."""
        return None

    def independent_loglik(self, params: Mapping, y: jax.Array, n_nodes: int = 32) -> jax.Array:
        """Exact log-likelihood with the factor autocorrelation set to zero.

        With an independent factor the likelihood is a product of one-dimensional integrals
        ``integral N(x; m, v) g_t(y_t | x) dx``, computed by adaptive Gauss-Hermite quadrature
        (Liu and Pierce 1994, Biometrika 81). Models with a closed form override this.
        """
        from smle.engine.quadrature import log_integral_adaptive

        independent = self.independent_params(params)
        if independent is None:
            raise NotImplementedError(f"model '{self.name}' has no independent-factor case")
        state = self.latent(independent)
        data = self.prepare(independent, y)
        n_periods = jax.tree.leaves(data)[0].shape[0]

        def log_integrand(x):  # x: (T, n) -> (T, n)
            prior = -0.5 * (jnp.log(2 * jnp.pi * state.init_var) + (x - state.init_mean) ** 2 / state.init_var)
            return prior + self.log_obs_density(independent, data, x)

        guess = jnp.full((n_periods,), state.init_mean)
        return jnp.sum(log_integral_adaptive(log_integrand, guess, n_nodes=n_nodes))

    # -- the parameter bijection used by the optimiser ---------------------------------------
    def to_real(self, params: Mapping) -> jax.Array:
        """Natural parameters -> unconstrained vector (per-parameter bijections by default).

        Models with a joint constraint (GARCH stationarity, say) override this and
        :meth:`from_real` together.
        """
        constraints = self.constraints()
        return jnp.stack([jnp.asarray(c.to_real(jnp.asarray(params[n], float))) for n, c in constraints.items()])

    def from_real(self, unconstrained: jax.Array) -> dict:
        """Unconstrained vector -> natural parameters (inverse of :meth:`to_real`)."""
        return {n: c.from_real(unconstrained[i]) for i, (n, c) in enumerate(self.constraints().items())}

    def pin(self, unconstrained: jax.Array, fixed: Mapping[str, float]) -> jax.Array:
        """``unconstrained`` with the coordinates of the ``fixed`` parameters set so that
        :meth:`from_real` returns their values, whatever the other coordinates are.

        With per-parameter bijections each fixed parameter is its own coordinate. A model whose
        bijection is joint overrides this (``garch-mix``: fixing alpha leaves beta the room
        1 - alpha). The free coordinates then range over the whole real line and map onto the
        admissible region of the free parameters given the fixed ones (a restricted fit).
        """
        names = list(self.constraints())
        for n, value in fixed.items():
            constraint = self.constraints()[n]
            unconstrained = unconstrained.at[names.index(n)].set(constraint.to_real(jnp.asarray(value, float)))
        return unconstrained

    # -- conveniences ------------------------------------------------------------------------
    @property
    def has_independent_case(self) -> bool:
        """Whether the model declares an independent-factor case (:meth:`independent_params`)."""
        return type(self).independent_params is not Model.independent_params

    @property
    def param_names(self) -> tuple[str, ...]:
        return tuple(self.constraints())

    def describe(self) -> str:
        lines = [f"{self.name}: {self.summary}"]
        for pname, constraint in self.constraints().items():
            lines.append(f"    {constraint.region(pname):<28} {constraint.meaning}")
        return "\n".join(lines)

    # -- goodness of fit (particle filter, PITs) -------------------------------------------------
    def obs_cdf(self, params: Mapping, data, x: jax.Array) -> jax.Array:
        """Conditional CDF ``F(y_t | x_t)`` of each observation at paths ``x`` of shape (T, S).

        Returns shape (T, S) for one series, or (T, S, n_series) with each series' own
        conditional CDF given x_t. Needed for probability integral transforms
        (:func:`smle.diagnose`); optional for estimation.
        """
        raise NotImplementedError(f"model '{self.name}' has no conditional CDF (obs_cdf)")

    def period_data(self, data, t):
        """The prepared data of period ``t`` alone, leading dimension 1 (``t`` may be traced).

        The default slices every leaf of ``data`` along its first axis; models whose prepared
        data hold leaves that are not indexed by time override this.
        """
        return jax.tree.map(lambda leaf: jax.lax.dynamic_slice_in_dim(leaf, t, 1, axis=0), data)


    # -- forecasts ------------------------------------------------------------------------------
    def simulate_ahead(self, params: Mapping, y: jax.Array, x_last: jax.Array, n_periods: int, key: jax.Array):
        """``(returns, variance, x)``, each (n_periods, S): the first observed series, its variance
        about the conditional mean given the period's state, and the state, for periods T+1..T+n
        after the data ``y``, one path per start ``x_last[s]`` (draws of x_T; ignored without a
        latent state, where ``x`` is None). Used by :func:`smle.forecast`."""
        raise SmleInputError(f"model '{self.name}' does not simulate beyond the data (no simulate_ahead hook), "
                             "so it has no forecasts; accepted: a model that defines simulate_ahead")


    # -- figures -------------------------------------------------------------------------------
    def factor_display(self, params: Mapping, x) -> tuple[np.ndarray, str]:
        """``(values, label)``: what a figure of the factor shows at states ``x`` (any shape).

        Must be increasing in x, so that quantiles of x map to quantiles of the shown quantity
        (the posterior band stays a band). Default: the state itself, labelled ``factor_name``.
        """
        return np.asarray(x, float), self.factor_name

    def component_names(self) -> tuple[str, ...]:
        """A short name per state component, in state order (figures, filter and test labels):
        ``(factor_name,)`` for a one-dimensional state, ``("x1", ..., "xk")`` by default for k > 1."""
        if self.state_dim <= 1:
            return (self.factor_name,)
        return tuple(f"x{j + 1}" for j in range(self.state_dim))


def model_options(model: Model) -> dict:
    """The constructor options of a model instance, by name (``dataclasses.fields`` leaves out
    the class-level attributes such as ``name``), as saved with a fit or a health report."""
    return {f.name: getattr(model, f.name) for f in dataclasses.fields(model)}
