"""GARCH(1,1) scale times a persistent latent mixing factor (a normal variance-mean mixture).

``garch-mix`` (options ``link="ig"`` or ``"lognormal"``, ``realized=False`` or ``True``)::

    r_t = m_t + sqrt(h_t) * (gamma (W_t - 1) + sqrt(W_t) z_t) / c,     z_t ~ N(0, 1)
    m_t = mu + ar1 r_{t-1}                                    (m_1 = mu / (1 - ar1))
    e_t = r_t - m_t
    h_t = omega + alpha e_{t-1}^2 + beta h_{t-1}              (h_1 = omega / (1 - alpha - beta))
    x_t = rho x_{t-1} + sqrt(1 - rho^2) eta_t,                x_1 ~ N(0, 1)
    W_t = F^{-1}(Phi(x_t); 1, lambda)   (link "ig": inverse Gaussian, mean 1, shape lambda)
    W_t = exp(s x_t - s^2 / 2)          (link "lognormal")
    c^2 = 1 + gamma^2 Var(W_t),   Var(W_t) = 1 / lambda (ig)  or  exp(s^2) - 1 (lognormal)

and with ``realized=True`` a second observed series, a realized measure ``RM_t`` in levels::

    log RM_t = xi + log(h_t W_t) + u_t,                       u_t ~ N(0, sigma_u^2)

The normalisation: ``E[gamma (W - 1) + sqrt(W) z] = 0`` and
``Var[gamma (W - 1) + sqrt(W) z] = gamma^2 Var(W) + E[W] = c^2``, so for ``W_t`` drawn from its
(stationary) marginal law ``e_t`` has mean 0 and variance ``h_t``. With ``rho = 0`` that is the
conditional law given the past, ``h_t`` is exactly the conditional variance and the returns
are a GARCH(1,1)-AR(1) process with i.i.d. standardised innovations (Bollerslev 1986), whose
unconditional variance is ``omega / (1 - alpha - beta)``. With ``rho != 0`` past returns carry
information on ``W_t``, and ``h_t`` is the variance given the past *before* that information
is used. ``h_t`` is computed from observed returns only (a data-only scan in :meth:`prepare`),
so it does not depend on the latent path.

The ig link with ``rho = 0``: ``c e_t / sqrt(h_t) = -gamma + gamma W + sqrt(W) z`` with W
inverse Gaussian of mean 1 and shape lambda is normal inverse Gaussian,
``NIG(alpha = sqrt(lambda + gamma^2), beta = gamma, mu = -gamma, delta = sqrt(lambda))``
(Barndorff-Nielsen 1997), so the model is a GARCH model with NIG innovations (Forsberg and
Bollerslev 2002, J. Applied Econometrics 17) and its likelihood is in closed form
(:meth:`GarchMix.independent_loglik`). ``gamma`` sets the skewness (negative: left skew).

Cost of the ig link: the exact quantile transform takes Newton steps on the IG CDF, about 30
times the cost of the rest of the density per draw. The log-likelihood therefore evaluates
``log W(x)`` from a piecewise-cubic Hermite interpolant on ``n_nodes`` equally spaced points of
``[-x_max, x_max]`` (exact values and exact slopes ``d log W / dx = phi(x) / (f(W) W)`` at the
nodes, built once per parameter value in :meth:`prepare`), extended linearly in ``log W``
beyond the grid. With the defaults (361 nodes on [-9, 9]) the interpolant is within 1e-7 of
the exact ``log W`` for every admissible lambda (measured in tests/test_model_garch_mix.py);
the closed form and the simulator use the exact quantile.

Constraints: omega > 0; alpha > 0, beta > 0 with alpha + beta < 1, a joint constraint mapped
by a softmax of (alpha, beta, 1 - alpha - beta) (:meth:`to_real`, :meth:`from_real`), checked
on concrete values by :meth:`check_joint`; |ar1| < 1; |rho| < 1; 0.01 < lambda < 1e4 (the
range on which the IG quantile is accurate); 0 < s < 3.

References: Bollerslev (1986), J. Econometrics 31 (GARCH); Barndorff-Nielsen (1997), Scand. J.
Statistics 24 (NIG); Forsberg and Bollerslev (2002), J. Applied Econometrics 17 (GARCH-NIG).
"""

from __future__ import annotations

import dataclasses
import math
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax.scipy.stats import norm

from smle import params as P
from smle.engine import latent
from smle.distributions import inverse_gaussian_log_density, nig_log_density, normal_to_inverse_gaussian
from smle.errors import SmleInputError
from smle.models import register
from smle.models.base import Model
from smle.models.garch_forward import continue_garch
from smle.models.measurements import (
    MEASUREMENT_LABELS, check_measurement, measurement_cdf, measurement_constraints, measurement_log_density,
    measurement_start, simulate_measurement,
)
from smle.models.realized_sv import check_realized_column

LOG_2PI = float(np.log(2 * np.pi))
LINKS = ("ig", "lognormal")
SHAPE_RANGE = (0.01, 1e4)


def log_interval(lower: float, upper: float, meaning: str) -> P.Constraint:
    """A number in (lower, upper), 0 < lower, mapped by a logit of its log (scale-free)."""
    log_lower, log_width = math.log(lower), math.log(upper) - math.log(lower)

    def to_real(v):
        p = (jnp.log(v) - log_lower) / log_width
        return jnp.log(p) - jnp.log1p(-p)

    def from_real(u):
        return jnp.exp(log_lower + log_width * P.jax_sigmoid(u))

    return P.Constraint(float(lower), float(upper), to_real, from_real, meaning)


class GarchMixData(NamedTuple):
    """What :meth:`GarchMix.prepare` computes from the data (leading dimension T first).

    Attributes:
      residual: e_t = r_t - m_t, shape (T,).
      variance: the GARCH scale h_t, shape (T,).
      log_measure: log RM_t, shape (T,), or None without the realized equation.
      table: cubic coefficients of log W per grid interval, shape (n_nodes - 1, 4), and
      end_slopes: d log W / dx at the two grid ends, shape (2,) (both None for the lognormal link).
    """

    residual: jax.Array
    variance: jax.Array
    log_measure: jax.Array | None
    table: jax.Array | None
    end_slopes: jax.Array | None


def _concrete(value):
    """A Python float for a concrete value, None for a JAX tracer."""
    try:
        return float(np.asarray(value))
    except (jax.errors.TracerArrayConversionError, jax.errors.ConcretizationTypeError, TypeError):
        return None


@register
@dataclasses.dataclass(frozen=True)
class GarchMix(Model):
    """See the module docstring for the equations.

    Attributes:
      link: "ig" (inverse Gaussian quantile of Phi(x_t); NIG innovations at rho = 0) or
        "lognormal" (W_t = exp(s x_t - s^2/2)).
      realized: add the log realized-measure equation (then y has shape (T, 2): return,
        realized measure in levels).
      n_nodes, x_max: the grid of the ig link's interpolant of log W (see the module docstring).
      measurement: with ``realized``, the second series' equation given the day's variance
        h_t W_t (:mod:`smle.models.measurements`): "lognormal" (the default, above), "gamma" (a
        realized variance from ``n_intraday`` intraday returns) or "log-range" (the day's
        high-low range of log prices in the unit of the returns; from ``smle prepare``,
        sqrt(4 ln 2 parkinson_pct2)).
      n_intraday: M, intraday returns per day in the realized variance (gamma only).
    """

    link: str = "ig"
    realized: bool = False
    n_nodes: int = 361
    x_max: float = 9.0
    measurement: str = "lognormal"
    n_intraday: int = 78

    name = "garch-mix"
    summary = "AR(1)-GARCH(1,1) scale times a persistent unit-mean latent mixing factor (skewed normal mixture)"
    equations = (
        "r_t = m_t + sqrt(h_t) (gamma (W_t - 1) + sqrt(W_t) z_t) / c; m_t = mu + ar1 r_{t-1}; "
        "h_t = omega + alpha e_{t-1}^2 + beta h_{t-1}; W_t = link(x_t), x_t = rho x_{t-1} + sqrt(1 - rho^2) eta_t"
    )
    expects_returns = True
    factor_name = "standardised mixing state x_t"
    series_labels = ("return", "realized measure")  # the first n_series of them (the second with realized)

    def __post_init__(self):
        if self.link not in LINKS:
            raise SmleInputError(f"link = {self.link!r} is not accepted; accepted: {', '.join(map(repr, LINKS))}")
        if not isinstance(self.realized, bool):
            raise SmleInputError(f"realized = {self.realized!r} is not accepted; accepted: True or False")
        if isinstance(self.n_nodes, bool) or not isinstance(self.n_nodes, int) or self.n_nodes < 50:
            raise SmleInputError(f"n_nodes = {self.n_nodes!r} is not accepted; accepted: an integer >= 50")
        if not (isinstance(self.x_max, (int, float)) and 5.0 <= self.x_max <= 30.0):
            raise SmleInputError(f"x_max = {self.x_max!r} is not accepted; accepted: a number in [5, 30]")
        check_measurement(self.name, self.measurement, self.n_intraday)
        # n_series is a class attribute elsewhere; here it follows the option
        object.__setattr__(self, "n_series", 2 if self.realized else 1)
        object.__setattr__(self, "series_labels", ("return", MEASUREMENT_LABELS[self.measurement]))

    # -- parameters --------------------------------------------------------------------------
    def constraints(self):
        out = {
            "mu": P.real("intercept of the conditional mean"),
            "ar1": P.interval(-1.0, 1.0, "AR(1) coefficient of the conditional mean, stationarity"),
            "omega": P.positive("GARCH intercept"),
            "alpha": P.interval(0.0, 1.0, "ARCH coefficient; jointly alpha + beta < 1"),
            "beta": P.interval(0.0, 1.0, "GARCH coefficient; jointly alpha + beta < 1"),
            "gamma": P.real("skewing mean shift of the mixture"),
        }
        if self.link == "ig":
            out["lambda"] = log_interval(*SHAPE_RANGE, "shape of the inverse Gaussian mixing law (Var W = 1/lambda)")
        else:
            out["s"] = P.interval(0.0, 3.0, "scale of log W (Var W = exp(s^2) - 1)")
        out["rho"] = P.interval(-1.0, 1.0, "autocorrelation of the mixing state")
        if self.realized:
            out.update(measurement_constraints(self.measurement))
        return out

    def check_joint(self, params) -> None:
        """Raise :class:`SmleInputError` unless alpha + beta < 1 (no-op on traced values)."""
        alpha, beta = _concrete(params["alpha"]), _concrete(params["beta"])
        if alpha is not None and beta is not None and not alpha + beta < 1.0:
            raise SmleInputError(
                f"params['alpha'] + params['beta'] = {alpha!r} + {beta!r} = {alpha + beta!r} is outside the "
                f"admissible region of model '{self.name}': alpha + beta < 1 (covariance stationarity of the "
                "GARCH scale)"
            )

    def to_real(self, params):
        self.check_joint(params)
        out = []
        for n, c in self.constraints().items():
            value = jnp.asarray(params[n], float)
            if n in ("alpha", "beta"):
                rest = 1.0 - jnp.asarray(params["alpha"], float) - jnp.asarray(params["beta"], float)
                out.append(jnp.log(value) - jnp.log(rest))
            else:
                out.append(jnp.asarray(c.to_real(value)))
        return jnp.stack(out)

    def from_real(self, unconstrained):
        names = list(self.constraints())
        i_alpha, i_beta = names.index("alpha"), names.index("beta")
        logits = jnp.stack([unconstrained[i_alpha], unconstrained[i_beta], jnp.zeros_like(unconstrained[i_alpha])])
        shares = jax.nn.softmax(logits)
        out = {}
        for i, (n, c) in enumerate(self.constraints().items()):
            out[n] = shares[0] if n == "alpha" else shares[1] if n == "beta" else c.from_real(unconstrained[i])
        return out

    def pin(self, unconstrained, fixed):
        """Fixed parameters held in the softmax bijection of (alpha, beta, 1 - alpha - beta).

        With alpha = a fixed, u_alpha = log(a (1 + e^{u_beta}) / (1 - a)) gives alpha = a and
        beta = (1 - a) e^{u_beta} / (1 + e^{u_beta}): beta ranges over (0, 1 - a) as u_beta ranges
        over the real line; likewise with beta fixed. Both fixed: their own logits.
        """
        names = list(self.constraints())
        others = {n: v for n, v in fixed.items() if n not in ("alpha", "beta")}
        u = Model.pin(self, unconstrained, others)
        pair = {n: jnp.asarray(fixed[n], float) for n in ("alpha", "beta") if n in fixed}
        if len(pair) == 2:
            rest = 1.0 - pair["alpha"] - pair["beta"]
            for n in ("alpha", "beta"):
                u = u.at[names.index(n)].set(jnp.log(pair[n]) - jnp.log(rest))
        elif len(pair) == 1:
            (held, value), = pair.items()
            other = "beta" if held == "alpha" else "alpha"
            u = u.at[names.index(held)].set(
                jnp.log(value) - jnp.log1p(-value) + jnp.logaddexp(0.0, u[names.index(other)]))
        return u

    def latent(self, params):
        return latent.standardised(jnp.asarray(params["rho"], float))

    # -- the mixing factor ---------------------------------------------------------------------
    def mixing_variance(self, params):
        """Var(W_t): 1 / lambda (ig) or exp(s^2) - 1 (lognormal)."""
        if self.link == "ig":
            return 1.0 / params["lambda"]
        return jnp.expm1(params["s"] ** 2)

    def _grid(self):
        return np.linspace(-self.x_max, self.x_max, self.n_nodes)

    def log_mixing_table(self, shape):
        """Cubic Hermite coefficients of log W(x) per grid interval, and the two end slopes."""
        nodes = jnp.asarray(self._grid())
        spacing = float(self._grid()[1] - self._grid()[0])
        w = normal_to_inverse_gaussian(nodes, 1.0, shape)
        value = jnp.log(w)
        slope = jnp.exp(norm.logpdf(nodes) - inverse_gaussian_log_density(w, 1.0, shape) - value)
        v0, v1 = value[:-1], value[1:]
        d0, d1 = spacing * slope[:-1], spacing * slope[1:]
        # power basis in t = (x - x_i) / spacing of the Hermite cubic through (v0, d0), (v1, d1)
        table = jnp.stack([v0, d0, 3.0 * (v1 - v0) - 2.0 * d0 - d1, 2.0 * (v0 - v1) + d0 + d1], axis=-1)
        return table, jnp.stack([slope[0], slope[-1]])

    def log_mixing(self, params, data: GarchMixData, x):
        """log W_t at states x (any shape): the interpolant for ig, exact for lognormal."""
        if self.link == "lognormal":
            s = params["s"]
            return s * x - 0.5 * s**2
        spacing = 2.0 * self.x_max / (self.n_nodes - 1)
        clipped = jnp.clip(x, -self.x_max, self.x_max)
        position = (clipped + self.x_max) / spacing
        index = jnp.minimum(jax.lax.stop_gradient(position).astype(jnp.int32), self.n_nodes - 2)
        t = position - index
        c = jnp.take(data.table, index, axis=0, mode="clip")
        inside = c[..., 0] + t * (c[..., 1] + t * (c[..., 2] + t * c[..., 3]))
        end_slope = jnp.where(x > 0, data.end_slopes[1], data.end_slopes[0])
        return inside + end_slope * (x - clipped)

    def mixing_exact(self, params, x):
        """W_t at states x by the exact link (simulation, checks)."""
        if self.link == "lognormal":
            s = params["s"]
            return jnp.exp(s * x - 0.5 * s**2)
        return normal_to_inverse_gaussian(x, 1.0, params["lambda"])

    def factor_display(self, params, x):
        """The mixing factor W_t (mean 1) by the exact link: the standardised state looks like noise
        in a figure, while W_t reads directly as the period's variance multiplier."""
        w = self.mixing_exact({k: jnp.asarray(v, float) for k, v in params.items()}, jnp.asarray(x, float))
        return np.asarray(w), "mixing factor W_t (mean 1)"

    # -- data --------------------------------------------------------------------------------
    def check_data(self, y):
        if self.realized:
            check_realized_column(self.name, y[:, 1])
        return y

    def _returns(self, y):
        return y[:, 0] if self.realized else y

    def garch_path(self, params, returns):
        """(e_t, h_t) from observed returns by a scan (the data-only part of the model)."""
        mu, ar1 = params["mu"], params["ar1"]
        omega, alpha, beta = params["omega"], params["alpha"], params["beta"]
        mean = jnp.concatenate([jnp.atleast_1d(mu / (1.0 - ar1)), mu + ar1 * returns[:-1]])
        residual = returns - mean
        h1 = omega / (1.0 - alpha - beta)

        def step(h, e):
            return omega + alpha * e**2 + beta * h, h

        _, variance = jax.lax.scan(step, h1, residual)
        return residual, variance

    def prepare(self, params, y):
        residual, variance = self.garch_path(params, self._returns(y))
        log_measure = jnp.log(y[:, 1]) if self.realized else None
        table = end_slopes = None
        if self.link == "ig":
            table, end_slopes = self.log_mixing_table(params["lambda"])
        return GarchMixData(residual, variance, log_measure, table, end_slopes)

    # -- the observation density ---------------------------------------------------------------
    def log_obs_density(self, params, data, x):
        gamma = params["gamma"]
        log_c = 0.5 * jnp.log1p(gamma**2 * self.mixing_variance(params))
        log_w = self.log_mixing(params, data, x)
        log_h = jnp.log(data.variance)[:, None]
        # c e_t / sqrt(h_t) given W is N(gamma (W - 1), W)
        scaled = (data.residual * jnp.exp(-0.5 * jnp.log(data.variance)))[:, None] * jnp.exp(log_c)
        w = jnp.exp(log_w)
        out = -0.5 * (LOG_2PI + log_h + log_w) + log_c - 0.5 * (scaled - gamma * (w - 1.0)) ** 2 / w
        if self.realized:
            out = out + measurement_log_density(self.measurement, data.log_measure[:, None], log_h + log_w, params,
                                                self.n_intraday)
        return out

    # -- simulation ----------------------------------------------------------------------------
    def simulate(self, params, n_periods, key):
        state_key, noise_key, measure_key = jax.random.split(key, 3)
        x = latent.sample_path(self.latent(params), state_key, n_periods)
        w = self.mixing_exact(params, x)
        gamma = params["gamma"]
        c = jnp.sqrt(1.0 + gamma**2 * self.mixing_variance(params))
        shocks = (gamma * (w - 1.0) + jnp.sqrt(w) * jax.random.normal(noise_key, (n_periods,))) / c
        mu, ar1 = params["mu"], params["ar1"]
        omega, alpha, beta = params["omega"], params["alpha"], params["beta"]

        def step(carry, shock):
            previous_return, h, first = carry
            mean = jnp.where(first, mu / (1.0 - ar1), mu + ar1 * previous_return)
            e = jnp.sqrt(h) * shock
            r = mean + e
            return (r, omega + alpha * e**2 + beta * h, False), (r, h)

        h1 = omega / (1.0 - alpha - beta)
        _, (r, h) = jax.lax.scan(step, (jnp.zeros_like(h1), h1, True), shocks)
        if not self.realized:
            return r, x
        measure = simulate_measurement(self.measurement, jnp.log(h * w), params, self.n_intraday, measure_key)
        return jnp.column_stack([r, measure]), x

    def simulate_ahead(self, params, y, x_last, n_periods, key):
        """Returns beyond the data, the GARCH recursion continued from the data's last period
        (:func:`continue_garch`) and the mixing state from ``x_last``; the variance is
        E[e_t^2 | h_t, W_t] = h_t (gamma^2 (W_t - 1)^2 + W_t) / c^2, whose mean over W_t is h_t."""
        state_key, noise_key = jax.random.split(key)
        x = latent.sample_ahead(self.latent(params), x_last, state_key, n_periods)
        w, gamma = self.mixing_exact(params, x), params["gamma"]
        c2 = 1.0 + gamma**2 * self.mixing_variance(params)
        shocks = (gamma * (w - 1.0) + jnp.sqrt(w) * jax.random.normal(noise_key, x.shape)) / jnp.sqrt(c2)
        returns = self._returns(jnp.asarray(y, float))
        residual, variance = self.garch_path(params, returns)
        r, h = continue_garch(params, returns[-1], residual[-1], variance[-1], shocks)
        return r, h * (gamma**2 * (w - 1.0) ** 2 + w) / c2, x

    def start_params(self, y):
        y = np.asarray(y, float)
        r = self._returns(y)
        ar1 = float(np.clip(np.corrcoef(r[1:], r[:-1])[0, 1], -0.5, 0.5))
        var = float(np.var(r))
        out = {"mu": float(np.mean(r) * (1 - ar1)), "ar1": ar1, "omega": 0.05 * var, "alpha": 0.05,
               "beta": 0.90, "gamma": 0.0}
        if self.link == "ig":
            out["lambda"] = 2.0
        else:
            out["s"] = 0.5
        out["rho"] = 0.5
        if self.realized:
            out.update(measurement_start(self.measurement, np.log(y[:, 1]), float(np.log(var))))
        return out

    # -- the independent-factor case -------------------------------------------------------------
    def independent_params(self, params):
        return {**params, "rho": jnp.zeros_like(jnp.asarray(params["rho"], float))}

    def independent_loglik(self, params, y, n_nodes: int = 32):
        """Log-likelihood at rho = 0: closed form (GARCH-NIG) for the ig link without a
        realized measure, adaptive Gauss-Hermite per period otherwise."""
        if self.link != "ig" or self.realized:
            return super().independent_loglik(params, y, n_nodes)
        residual, variance = self.garch_path(params, jnp.asarray(y, float))
        shape, gamma = params["lambda"], params["gamma"]
        c = jnp.sqrt(1.0 + gamma**2 / shape)
        scale = jnp.sqrt(variance) / c  # e_t = scale * Y_t, Y_t ~ NIG(sqrt(lambda + gamma^2), gamma, -gamma, sqrt(lambda))
        return jnp.sum(
            nig_log_density(residual, jnp.sqrt(shape + gamma**2) / scale, gamma / scale, -gamma * scale,
                            jnp.sqrt(shape) * scale)
        )

    # -- goodness of fit -------------------------------------------------------------------------
    def obs_cdf(self, params, data, x):
        """CDF of the return given x_t (normal given W_t), and of the realized measure when enabled."""
        from smle.distributions import normal_cdf  # here, not at the top: keeps this hook self-contained

        gamma = params["gamma"]
        log_c = 0.5 * jnp.log1p(gamma**2 * self.mixing_variance(params))
        log_w = self.log_mixing(params, data, x)
        scaled = (data.residual * jnp.exp(-0.5 * jnp.log(data.variance)))[:, None] * jnp.exp(log_c)
        w = jnp.exp(log_w)
        return_cdf = normal_cdf((scaled - gamma * (w - 1.0)) * jnp.exp(-0.5 * log_w))
        if not self.realized:
            return return_cdf
        log_h = jnp.log(data.variance)[:, None]
        measure_cdf = measurement_cdf(self.measurement, data.log_measure[:, None], log_h + log_w, params,
                                      self.n_intraday)
        return jnp.stack([return_cdf, measure_cdf], axis=-1)

    def period_data(self, data, t):
        """Period t's residual, variance and realized measure; the log W table is not indexed by time."""
        def one(leaf):
            return None if leaf is None else jax.lax.dynamic_slice_in_dim(leaf, t, 1, axis=0)

        return data._replace(residual=one(data.residual), variance=one(data.variance),
                             log_measure=one(data.log_measure))
