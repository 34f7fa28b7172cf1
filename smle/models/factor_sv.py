"""Factor stochastic volatility: N return series whose log variances share one common factor.

``factor-sv`` (option ``n_series`` = N, from 2 to 10)::

    y_{i,t} = exp(h_{i,t} / 2) eps_{i,t},      eps_{i,t} ~ N(0, 1) independent across i and t
    h_{i,t} = a_i + b_i f_t + g_{i,t},          i = 1..N
    f_t = phi_f f_{t-1} + sqrt(1 - phi_f^2) eta_t          (unit stationary variance)
    g_{i,t} = phi_i g_{i,t-1} + sigma_eta_i eta_{i,t}      (N idiosyncratic components)

every component a stationary AR(1) started from its stationary law, all independent. The state
is ``x_t = (f_t, g_{1,t}, ..., g_{N,t})``, of dimension N + 1. Given the state the returns are
conditionally Gaussian and independent across series (a constant conditional correlation is
left for later): co-movement comes only through the common log-variance factor.

Identification: f_t has unit variance, so the scale of each b_i is identified, and the sign of
the factor is fixed by ``b_1 > 0``. Parameters: ``phi_f`` in (-1, 1); for each series ``a_i``
(mean log variance), ``b_i`` (loading; b_1 positive), ``phi_i`` in (-1, 1), ``sigma_eta_i > 0``.

log g_t has a Hessian with non-zero entries only on the diagonal and between f_t and each
g_{i,t}: the EIS regression uses the star basis with the factor as the hub, 2N + 1 quadratic
terms instead of (N + 1)(N + 2) / 2. (Chib, Nardari and Shephard 2006, J. Econometrics 134,
study this class of models.)
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from smle import params as P
from smle.engine import latent_var
from smle.engine.eis_multi import star_pairs
from smle.errors import SmleInputError, describe
from smle.models import register
from smle.models.base import Model
from smle.models.sv import LOG_2PI

MAX_SERIES = 10


@register
@dataclasses.dataclass(frozen=True)
class FactorSV(Model):
    n_series: int = 2

    name = "factor-sv"
    summary = "N return series with one common and N idiosyncratic log-variance factors"
    equations = ("y_i,t = exp(h_i,t/2) eps_i,t; h_i,t = a_i + b_i f_t + g_i,t; "
                 "f_t = phi_f f_t-1 + sqrt(1 - phi_f^2) eta_t; g_i,t = phi_i g_i,t-1 + sigma_eta_i eta_i,t")
    expects_returns = True
    series_labels = tuple(f"return {i + 1}" for i in range(MAX_SERIES))
    factor_name = "common factor f_t and idiosyncratic log-variance components g_i,t"

    def __post_init__(self):
        if isinstance(self.n_series, bool) or not isinstance(self.n_series, int) \
                or not 2 <= self.n_series <= MAX_SERIES:
            raise SmleInputError(f"n_series = {describe(self.n_series)} is not accepted for model 'factor-sv'; "
                                 f"accepted: an integer from 2 to {MAX_SERIES}")

    @property
    def state_dim(self) -> int:
        return self.n_series + 1

    def _names(self, stem: str) -> list[str]:
        return [f"{stem}_{i + 1}" for i in range(self.n_series)]

    def constraints(self):
        out = {"phi_f": P.interval(-1.0, 1.0, "stationarity of the common factor")}
        out.update({n: P.real("mean log variance of the series") for n in self._names("a")})
        for n in self._names("b"):
            out[n] = P.positive("loading on the common factor (positive: fixes its sign)") if n == "b_1" \
                else P.real("loading on the common factor")
        out.update({n: P.interval(-1.0, 1.0, "stationarity of the idiosyncratic component")
                    for n in self._names("phi")})
        out.update({n: P.positive("innovation scale of the idiosyncratic component") for n in self._names("sigma_eta")})
        return out

    def _vector(self, params, stem: str) -> jax.Array:
        return jnp.stack([jnp.asarray(params[n], float) for n in self._names(stem)])

    def latent_var(self, params):
        phi_f = jnp.asarray(params["phi_f"], float)
        phi = jnp.concatenate([phi_f[None], self._vector(params, "phi")])
        sigma = jnp.concatenate([jnp.sqrt(1.0 - phi_f**2)[None], self._vector(params, "sigma_eta")])
        return latent_var.independent_ar1(0.0, phi, sigma)

    def pairs(self):
        return star_pairs(self.state_dim, hub=0)

    def log_variance(self, params, x) -> jax.Array:
        """h_{i,t} from states x of shape (..., N + 1): shape (..., N)."""
        return self._vector(params, "a") + self._vector(params, "b") * x[..., :1] + x[..., 1:]

    def log_obs_density(self, params, data, x):
        log_var = self.log_variance(params, x)
        return -0.5 * jnp.sum(LOG_2PI + log_var + data[:, None, :] ** 2 * jnp.exp(-log_var), axis=-1)

    def obs_cdf(self, params, data, x):
        from smle.distributions import normal_cdf

        return normal_cdf(data[:, None, :] * jnp.exp(-0.5 * self.log_variance(params, x)))

    def component_names(self):
        return ("f",) + tuple(f"g_{i + 1}" for i in range(self.n_series))

    def simulate(self, params, n_periods, key):
        state_key, noise_key = jax.random.split(key)
        x = latent_var.sample_path(self.latent_var(params), state_key, n_periods)
        y = jnp.exp(0.5 * self.log_variance(params, x)) * jax.random.normal(noise_key, (n_periods, self.n_series))
        return y, x

    def start_params(self, y):
        y = np.asarray(y, float)
        out = {"phi_f": 0.95}
        for i in range(self.n_series):
            out.update({f"a_{i + 1}": float(np.log(np.var(y[:, i]))), f"b_{i + 1}": 0.3,
                        f"phi_{i + 1}": 0.9, f"sigma_eta_{i + 1}": 0.2})
        return {n: out[n] for n in self.constraints()}
