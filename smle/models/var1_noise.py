"""A k-dimensional Gaussian VAR(1) state observed with noise: the exactness reference of the
multivariate EIS engine.

``var1-noise`` (option ``n_series`` = k, the dimension of the state and of y_t; option
``transition`` = "diagonal" or "full")::

    y_t = x_t + e_t,                              e_t ~ N(0, diag(sigma_eps_1^2, ..., sigma_eps_k^2))
    x_t - mu = Phi (x_{t-1} - mu) + eta_t,        eta_t ~ N(0, diag(sigma_eta_1^2, ..., sigma_eta_k^2))
    x_1 from the stationary law (mean mu, covariance solving Sigma = Phi Sigma Phi' + Q)

Parameters ``mu_i``, ``sigma_eta_i``, ``sigma_eps_i`` (i = 1..k) and either ``phi_i`` (diagonal
Phi, each in (-1, 1)) or ``phi_i_j`` (row i, column j of a full Phi, any real numbers whose
matrix has spectral radius below one: a joint constraint, checked on the values a user gives;
the optimiser is not kept inside it, a non-stationary trial point has no finite likelihood and
the line search steps back).

The likelihood is exact by the Kalman filter (:mod:`smle.reference.kalman_var`); log g_t is
quadratic in x_t and separable across components, so EIS on the diagonal basis reproduces it to
rounding error for any number of draws that identifies the regression.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from smle import params as P
from smle.engine import latent_var as latent_var_module
from smle.engine.eis_multi import diagonal_pairs
from smle.engine.gaussian import log_normal_density
from smle.errors import SmleInputError, describe
from smle.models import register
from smle.models.base import Model

TRANSITIONS = ("diagonal", "full")
MAX_DIM = 20


def _vector(params, name: str, k: int) -> jax.Array:
    """``params[name_1], ..., params[name_k]`` as one vector."""
    return jnp.stack([jnp.asarray(params[f"{name}_{i + 1}"], float) for i in range(k)])


def _concrete(value):
    """A Python float, or None when ``value`` is traced."""
    try:
        return float(value)
    except (TypeError, jax.errors.ConcretizationTypeError):
        return None


@register
@dataclasses.dataclass(frozen=True)
class VAR1Noise(Model):
    n_series: int = 2
    transition: str = "diagonal"

    name = "var1-noise"
    summary = "Gaussian VAR(1) state of dimension k observed with Gaussian noise (linear Gaussian reference)"
    equations = ("y_t = x_t + e_t, e_t ~ N(0, diag(sigma_eps^2)); "
                 "x_t - mu = Phi (x_{t-1} - mu) + eta_t, eta_t ~ N(0, diag(sigma_eta^2))")
    series_labels = tuple(f"observation {i + 1}" for i in range(MAX_DIM))
    factor_name = "state x_t"

    def __post_init__(self):
        if isinstance(self.n_series, bool) or not isinstance(self.n_series, int) or not 2 <= self.n_series <= MAX_DIM:
            raise SmleInputError(f"n_series = {describe(self.n_series)} is not accepted for model 'var1-noise'; "
                                 f"accepted: an integer from 2 to {MAX_DIM} (the state dimension k)")
        if self.transition not in TRANSITIONS:
            raise SmleInputError(f"transition = {describe(self.transition)} is not accepted for model 'var1-noise'; "
                                 "accepted: 'diagonal' or 'full'")

    @property
    def state_dim(self) -> int:
        return self.n_series

    def _phi_names(self) -> list[str]:
        k = self.n_series
        if self.transition == "diagonal":
            return [f"phi_{i + 1}" for i in range(k)]
        return [f"phi_{i + 1}_{j + 1}" for i in range(k) for j in range(k)]

    def constraints(self):
        k = self.n_series
        out = {f"mu_{i + 1}": P.real("state mean") for i in range(k)}
        for name in self._phi_names():
            if self.transition == "diagonal":
                out[name] = P.interval(-1.0, 1.0, "stationarity of the state")
            else:
                out[name] = P.real("entry of Phi (jointly: spectral radius < 1)")
        out.update({f"sigma_eta_{i + 1}": P.positive("state innovation scale") for i in range(k)})
        out.update({f"sigma_eps_{i + 1}": P.positive("measurement noise scale") for i in range(k)})
        return out

    def transition_matrix(self, params) -> jax.Array:
        """Phi, shape (k, k)."""
        k = self.n_series
        entries = jnp.stack([jnp.asarray(params[n], float) for n in self._phi_names()])
        return jnp.diag(entries) if self.transition == "diagonal" else entries.reshape(k, k)

    def check_joint(self, params) -> None:
        """Raise SmleInputError unless a full Phi has spectral radius below one (no-op when traced)."""
        if self.transition == "full":
            values = [_concrete(params[n]) for n in self._phi_names()]
            if None not in values:
                try:
                    latent_var_module.check_stationary(np.reshape(values, (self.n_series,) * 2), "Phi")
                except SmleInputError as error:
                    raise SmleInputError(f"params phi_i_j of model '{self.name}': {error}") from None

    def latent_var(self, params):
        k = self.n_series
        mean, sigma_eta = _vector(params, "mu", k), _vector(params, "sigma_eta", k)
        if self.transition == "diagonal":
            return latent_var_module.independent_ar1(mean, _vector(params, "phi", k), sigma_eta)
        return latent_var_module.stationary(mean, self.transition_matrix(params), jnp.diag(sigma_eta**2))

    def pairs(self):
        return diagonal_pairs(self.n_series)

    def log_obs_density(self, params, data, x):
        variance = _vector(params, "sigma_eps", self.n_series) ** 2
        return jnp.sum(log_normal_density(data[:, None, :], x, variance), axis=-1)

    def gaussian_measurement(self, params):
        """The measurement covariance H = diag(sigma_eps^2), shape (k, k): y_t = x_t + N(0, H)."""
        return jnp.diag(_vector(params, "sigma_eps", self.n_series) ** 2)

    def obs_cdf(self, params, data, x):
        from smle.distributions import normal_cdf

        return normal_cdf((data[:, None, :] - x) / _vector(params, "sigma_eps", self.n_series))

    def component_names(self):
        return tuple(f"x_{i + 1}" for i in range(self.n_series))

    def mode_guess(self, params, data):
        return jnp.asarray(data, float)

    def simulate(self, params, n_periods, key):
        state_key, noise_key = jax.random.split(key)
        x = latent_var_module.sample_path(self.latent_var(params), state_key, n_periods)
        noise = jax.random.normal(noise_key, (n_periods, self.n_series))
        return x + _vector(params, "sigma_eps", self.n_series) * noise, x

    def start_params(self, y):
        y = np.asarray(y, float)
        out = {}
        for i in range(self.n_series):
            column = y[:, i]
            r1 = float(np.corrcoef(column[1:], column[:-1])[0, 1])
            phi = float(np.clip(r1, 0.05, 0.95))
            var = float(np.var(column))
            out[f"mu_{i + 1}"] = float(np.mean(column))
            if self.transition == "diagonal":
                out[f"phi_{i + 1}"] = phi
            else:
                out.update({f"phi_{i + 1}_{j + 1}": (phi if i == j else 0.0) for j in range(self.n_series)})
            out[f"sigma_eta_{i + 1}"] = float(np.sqrt(0.5 * var * (1 - phi**2)))
            out[f"sigma_eps_{i + 1}"] = float(np.sqrt(0.5 * var))
        return {n: out[n] for n in self.constraints()}
