"""AR(1)-GARCH(1,1) with normal, standardised Student-t or NIG innovations: no latent state,
likelihood in closed form.

``garch`` (options ``innovations="normal"``, ``"t"`` or ``"nig"``; ``variance_start=
"unconditional"`` or ``"sample"``)::

    r_t = m_t + sqrt(h_t) z_t,        z_t i.i.d., mean 0, variance 1
    m_t = mu + ar1 r_{t-1}                                   (m_1 = mu / (1 - ar1))
    e_t = r_t - m_t
    h_t = omega + alpha e_{t-1}^2 + beta h_{t-1}

The conditional mean, the residuals and the recursion are those of ``garch-mix``
(:mod:`smle.models.garch_mix`), so that ``garch`` with NIG innovations is ``garch-mix`` with
``rho = 0`` exactly. ``mu`` is the intercept; the mean of r_t is ``mu / (1 - ar1)``.

Innovations z_t:

* ``normal``: N(0, 1) (Bollerslev 1986);
* ``t``: Student-t with ``nu > 2`` degrees of freedom rescaled to unit variance, i.e. scale
  ``sqrt((nu - 2) / nu)`` (Bollerslev 1987, Review of Economics and Statistics 69);
* ``nig``: ``z = (gamma (W - 1) + sqrt(W) Z) / c`` with W inverse Gaussian of mean 1 and shape
  ``lambda``, Z ~ N(0, 1), ``c^2 = 1 + gamma^2 / lambda``: normal inverse Gaussian,
  ``c z ~ NIG(alpha = sqrt(lambda + gamma^2), beta = gamma, mu = -gamma, delta = sqrt(lambda))``
  (Barndorff-Nielsen 1997; Forsberg and Bollerslev 2002), the parameterisation of
  ``garch-mix`` with the ig link.

Start of the variance recursion (``variance_start``):

* ``"unconditional"`` (default, as ``garch-mix``): ``h_1 = omega / (1 - alpha - beta)``;
* ``"sample"``: the pre-sample variance and squared residual both equal the sample mean of the
  squared residuals, ``h_0 = e_0^2 = (1/T) sum_t e_t^2``, so
  ``h_1 = omega + (alpha + beta) (1/T) sum_t e_t^2`` (a function of the parameters through the
  residuals). This is the convention of the GARCH benchmark of Fiorentini, Calzolari and
  Panattoni (1996, J. Applied Econometrics 11) and McCullough and Renfro (1998, J. Economic
  and Social Measurement 25); ``tests/test_model_garch.py`` reproduces it.

The model has no latent state (``state_dim = 0``): :meth:`Garch.loglik_closed_form` and
:meth:`Garch.log_predictive` give the likelihood directly, :meth:`Garch.predictive_cdf` the
probability integral transforms. The state-space hooks ``latent`` and ``log_obs_density``
raise ``NotImplementedError``.

Constraints: omega > 0; alpha > 0, beta > 0 with alpha + beta < 1 (covariance stationarity;
the same softmax bijection and joint check as ``garch-mix``); |ar1| < 1; nu > 2;
0.01 < lambda < 1e4.

References: Bollerslev (1986), J. Econometrics 31; Bollerslev (1987), Rev. Econ. Stat. 69;
Barndorff-Nielsen (1997), Scand. J. Statistics 24; Forsberg and Bollerslev (2002), J. Applied
Econometrics 17; Fiorentini, Calzolari and Panattoni (1996), J. Applied Econometrics 11.
"""

from __future__ import annotations

import dataclasses
import math
from typing import ClassVar, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax.scipy.special import betainc

from smle import params as P
from smle.distributions import (
    nig_log_density,
    normal_cdf,
    normal_to_inverse_gaussian,
    standardized_student_t_log_density,
)
from smle.errors import SmleInputError
from smle.models import register
from smle.models.base import Model
from smle.models.garch_forward import continue_garch
from smle.models.garch_mix import GarchMix

LOG_2PI = math.log(2.0 * math.pi)
INNOVATIONS = ("normal", "t", "nig")
VARIANCE_STARTS = ("unconditional", "sample")

# The NIG CDF is E_W[Phi((c z + gamma - gamma W) / sqrt(W))] over W ~ IG(1, lambda), written as
# an integral over a standard normal x with W = W(x) (the quantile transform) and computed by
# the trapezoidal rule on [-12, 12], step 0.05. The integrand is analytic in x and decays like
# phi(x), so the rule converges exponentially (Trefethen and Weideman 2014, SIAM Review 56);
# agreement with scipy.stats.norminvgauss.cdf is measured in tests/test_model_garch.py.
_CDF_NODES = np.linspace(-12.0, 12.0, 481)
_CDF_WEIGHTS = (_CDF_NODES[1] - _CDF_NODES[0]) * np.exp(-0.5 * _CDF_NODES**2 - 0.5 * LOG_2PI)


class GarchPath(NamedTuple):
    """Residuals and conditional variances, both shape (T,)."""

    residual: jax.Array
    variance: jax.Array


def _student_t_cdf(x, nu):
    """CDF of the Student-t law with nu degrees of freedom (regularised incomplete beta)."""
    tail = 0.5 * betainc(0.5 * nu, 0.5, nu / (nu + x * x))
    return jnp.where(x > 0, 1.0 - tail, tail)


def garch_from_shocks(params, shocks):
    """Simulated returns r_t and variances h_t (both (T,)) from standardised shocks z_t (T,).

    h_1 = omega / (1 - alpha - beta), m_1 = mu / (1 - ar1): the process started from its
    unconditional variance and mean (the conventions of ``garch-mix``, which could share this).
    """
    omega, alpha, beta = params["omega"], params["alpha"], params["beta"]

    def variance_step(h, z):
        return omega + (alpha * z**2 + beta) * h, h  # h_{t+1} = omega + alpha e_t^2 + beta h_t, e_t = sqrt(h_t) z_t

    _, variance = jax.lax.scan(variance_step, omega / (1.0 - alpha - beta), shocks)
    residual = jnp.sqrt(variance) * shocks
    mu, ar1 = params["mu"], params["ar1"]

    def mean_step(previous_return, e):
        r = mu + ar1 * previous_return + e
        return r, r

    # r_0 = mu / (1 - ar1) gives m_1 = mu + ar1 mu / (1 - ar1) = mu / (1 - ar1)
    _, returns = jax.lax.scan(mean_step, mu / (1.0 - ar1), residual)
    return returns, variance


@register
@dataclasses.dataclass(frozen=True)
class Garch(Model):
    """See the module docstring for the equations.

    Attributes:
      innovations: "normal", "t" (standardised Student-t) or "nig" (normal inverse Gaussian).
      variance_start: "unconditional" (h_1 = omega / (1 - alpha - beta)) or "sample"
        (h_0 = e_0^2 = mean squared residual).
    """

    innovations: str = "normal"
    variance_start: str = "unconditional"

    name = "garch"
    summary = "AR(1)-GARCH(1,1) with normal, standardised Student-t or NIG innovations (no latent state)"
    equations = (
        "r_t = m_t + sqrt(h_t) z_t; m_t = mu + ar1 r_{t-1}; h_t = omega + alpha e_{t-1}^2 + beta h_{t-1}; "
        "z_t i.i.d. normal, standardised t(nu) or NIG(gamma, lambda)"
    )
    expects_returns = True
    factor_name = "conditional standard deviation sqrt(h_t)"
    state_dim: ClassVar[int] = 0
    series_labels: ClassVar[tuple[str, ...]] = ("return",)

    def __post_init__(self):
        if self.innovations not in INNOVATIONS:
            raise SmleInputError(
                f"innovations = {self.innovations!r} is not accepted; accepted: {', '.join(map(repr, INNOVATIONS))}"
            )
        if self.variance_start not in VARIANCE_STARTS:
            raise SmleInputError(
                f"variance_start = {self.variance_start!r} is not accepted; accepted: "
                f"{', '.join(map(repr, VARIANCE_STARTS))}"
            )

    # -- parameters --------------------------------------------------------------------------
    def constraints(self):
        # the conditional mean and GARCH parameters, and the NIG shape, exactly as in garch-mix
        mix = GarchMix().constraints()
        out = {name: mix[name] for name in ("mu", "ar1", "omega", "alpha", "beta")}
        if self.innovations == "t":
            out["nu"] = P.greater_than(2.0, "degrees of freedom of the innovations; a finite variance needs nu > 2")
        elif self.innovations == "nig":
            out["gamma"] = P.real("skewness of the NIG innovations (negative: left skew)")
            out["lambda"] = mix["lambda"]
        return out

    # alpha + beta < 1: the joint check and the softmax bijection of garch-mix, which only look
    # at "alpha", "beta" and self.constraints()
    check_joint = GarchMix.check_joint
    to_real = GarchMix.to_real
    from_real = GarchMix.from_real
    pin = GarchMix.pin

    # -- the state-space hooks do not apply --------------------------------------------------
    def latent(self, params):
        raise NotImplementedError(
            f"model '{self.name}' has no latent state (state_dim = 0); its likelihood is in closed form: "
            "use loglik_closed_form or log_predictive"
        )

    def log_obs_density(self, params, data, x):
        raise NotImplementedError(
            f"model '{self.name}' has no latent state (state_dim = 0); there is no density given a state: "
            "use log_predictive"
        )

    # -- the variance recursion ----------------------------------------------------------------
    def garch_path(self, params, y) -> GarchPath:
        """Residuals e_t and conditional variances h_t from the returns ``y`` (T,), by a scan."""
        returns = jnp.asarray(y, float)
        mu, ar1 = params["mu"], params["ar1"]
        omega, alpha, beta = params["omega"], params["alpha"], params["beta"]
        mean = jnp.concatenate([jnp.atleast_1d(mu / (1.0 - ar1)), mu + ar1 * returns[:-1]])
        residual = returns - mean
        if self.variance_start == "unconditional":
            h1 = omega / (1.0 - alpha - beta)
        else:
            h1 = omega + (alpha + beta) * jnp.mean(residual**2)

        def step(h, e):
            return omega + alpha * e**2 + beta * h, h

        _, variance = jax.lax.scan(step, h1, residual)
        return GarchPath(residual, variance)

    def prepare(self, params, y):
        """The residual and variance paths (:class:`GarchPath`)."""
        return self.garch_path(params, y)

    def _nig_scale(self, params):
        return jnp.sqrt(1.0 + params["gamma"] ** 2 / params["lambda"])

    # -- the likelihood --------------------------------------------------------------------------
    def log_predictive(self, params, data) -> jax.Array:
        """log p(r_t | r_1..r_{t-1}) for each period, shape (T,).

        Args:
          params: mapping name -> scalar (natural values, admissible).
          data: the returns r_t, shape (T,).
        """
        residual, variance = self.garch_path(params, data)
        log_sd = 0.5 * jnp.log(variance)
        z = residual * jnp.exp(-log_sd)
        if self.innovations == "normal":
            return -0.5 * (LOG_2PI + z**2) - log_sd
        if self.innovations == "t":
            return standardized_student_t_log_density(z, params["nu"]) - log_sd
        shape, gamma = params["lambda"], params["gamma"]
        scale = jnp.sqrt(variance) / self._nig_scale(params)  # e_t = scale * Y_t, Y_t NIG as in the docstring
        return nig_log_density(residual, jnp.sqrt(shape + gamma**2) / scale, gamma / scale, -gamma * scale,
                               jnp.sqrt(shape) * scale)

    def factor_path(self, params, data) -> jax.Array:
        """The conditional standard deviations sqrt(h_t), shape (T,): what a fit reports as its path."""
        return jnp.sqrt(self.garch_path(params, data).variance)

    def loglik_closed_form(self, params, data) -> jax.Array:
        """The exact log-likelihood sum_t log p(r_t | past), a scalar (pure JAX, differentiable)."""
        return jnp.sum(self.log_predictive(params, data))

    def predictive_cdf(self, params, data) -> jax.Array:
        """Probability integral transforms F(r_t | past), shape (T,)."""
        residual, variance = self.garch_path(params, data)
        z = residual / jnp.sqrt(variance)
        if self.innovations == "normal":
            return normal_cdf(z)
        if self.innovations == "t":
            nu = params["nu"]
            return _student_t_cdf(z * jnp.sqrt(nu / (nu - 2.0)), nu)
        gamma = params["gamma"]
        w = normal_to_inverse_gaussian(jnp.asarray(_CDF_NODES), 1.0, params["lambda"])  # (n_nodes,)
        shifted = (self._nig_scale(params) * z + gamma)[:, None] - gamma * w
        return normal_cdf(shifted / jnp.sqrt(w)) @ jnp.asarray(_CDF_WEIGHTS)

    # -- simulation ----------------------------------------------------------------------------
    def innovations_sample(self, params, n_periods, key) -> jax.Array:
        """n_periods i.i.d. standardised innovations z_t (mean 0, variance 1)."""
        if self.innovations == "normal":
            return jax.random.normal(key, (n_periods,))
        if self.innovations == "t":
            nu = params["nu"]
            return jax.random.t(key, nu, (n_periods,)) * jnp.sqrt((nu - 2.0) / nu)
        mixing_key, normal_key = jax.random.split(key)
        w = normal_to_inverse_gaussian(jax.random.normal(mixing_key, (n_periods,)), 1.0, params["lambda"])
        z = jax.random.normal(normal_key, (n_periods,))
        return (params["gamma"] * (w - 1.0) + jnp.sqrt(w) * z) / self._nig_scale(params)

    def simulate(self, params, n_periods, key):
        """Return ``(r, sigma)``: returns (T,) and the conditional standard deviations sqrt(h_t) (T,).

        The simulated path starts from the unconditional variance and mean whatever
        ``variance_start`` is (a sample start needs the data).
        """
        returns, variance = garch_from_shocks(params, self.innovations_sample(params, n_periods, key))
        return returns, jnp.sqrt(variance)

    def simulate_ahead(self, params, y, x_last, n_periods, key):
        """Returns and conditional variances h_t beyond the data (:func:`continue_garch`), one path
        per entry of ``x_last`` (no latent state: only its length is used); x is None."""
        residual, variance = self.garch_path(params, y)
        width = jnp.shape(x_last)[0]
        shocks = self.innovations_sample(params, n_periods * width, key).reshape(n_periods, width)
        returns, h = continue_garch(params, jnp.asarray(y, float)[-1], residual[-1], variance[-1], shocks)
        return returns, h, None

    def start_params(self, y):
        r = np.asarray(y, float)
        ar1 = float(np.clip(np.corrcoef(r[1:], r[:-1])[0, 1], -0.5, 0.5))
        var = float(np.var(r))
        out = {"mu": float(np.mean(r) * (1 - ar1)), "ar1": ar1, "omega": 0.05 * var, "alpha": 0.05, "beta": 0.90}
        if self.innovations == "t":
            out["nu"] = 8.0
        elif self.innovations == "nig":
            out["gamma"] = 0.0
            out["lambda"] = 2.0
        return out
