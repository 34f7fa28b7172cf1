"""Parameter uncertainty in forecasts: parameter vectors drawn from a fit's asymptotic normal law.

A fit maximises the likelihood over the unconstrained coordinates u of its free parameters
(:mod:`smle.restricted`); the inverse Hessian C there is the asymptotic covariance of u-hat, and
the reported covariance of the natural parameters is its delta-method image J C J' (J the
Jacobian of the natural free parameters in u). :func:`parameter_sample` recovers
C = J^-1 Sigma J^-T from the stored covariance Sigma, draws u_i ~ N(u-hat, C) and maps each
draw through the model's bijection, so every draw is admissible (inside the open region,
GARCH's alpha + beta < 1 included) and the fixed parameters of a restricted fit hold exactly.

Simulating the predictive paths of each draw and pooling them gives the predictive
distribution averaged over the estimates' sampling law: the simulation approach of Krinsky and
Robb (1986, Review of Economics and Statistics 68) applied to forecasts, which widens the
bands by the parameter error (recalled from memory). Forecasts remain statistical output, not
advice (:data:`smle.results.CAUTION`).
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np

from smle.errors import SmleInputError
from smle.models import Model
from smle.restricted import Restriction, compiled_natural, _compiled_jacobian
from smle.validation import check_integer

MAX_PARAMETER_DRAWS = 10000


def sub_seed(seed: int, stream: int, index: int = 0) -> int:
    """A seed that is a function of ``seed``, a stream number and an index (NumPy SeedSequence)."""
    return int(np.random.SeedSequence([seed, stream, index]).generate_state(1)[0])


def check_parameter_draws(parameter_draws, n_paths: int) -> int:
    """``parameter_draws`` as an int: 0 (off) or 2 .. min(n_paths, 10000)."""
    draws = check_integer("parameter_draws", parameter_draws, 0)
    if draws == 1 or draws > min(n_paths, MAX_PARAMETER_DRAWS):
        raise SmleInputError(f"parameter_draws = {draws} is not accepted; accepted: 0 (the estimates taken as known) "
                             f"or an integer from 2 to min(n_paths, {MAX_PARAMETER_DRAWS}) = "
                             f"{min(n_paths, MAX_PARAMETER_DRAWS)} (each draw gets n_paths / parameter_draws paths)")
    return draws


def unconstrained_law(model: Model, params: dict, covariance, fixed) -> tuple[Restriction, np.ndarray, np.ndarray]:
    """``(restriction, u_hat, C)``: the free unconstrained coordinates at the estimates and their
    covariance C = J^-1 Sigma J^-T, from the natural covariance ``covariance`` (Sigma, in the
    model's parameter order) of a fit with ``fixed`` parameters held."""
    restriction = Restriction.of(model, dict(fixed or {}))
    free, names = restriction.free_names, model.param_names
    u_hat = np.asarray(restriction.free_start({n: float(params[n]) for n in names}), float)
    back = compiled_natural(restriction)(jnp.asarray(u_hat))
    if not all(np.isclose(float(back[n]), float(params[n]), rtol=1e-9, atol=1e-12) for n in names):
        raise SmleInputError(f"the estimates {params} are not a point of model '{model.name}''s parameterisation "
                             "with the fit's fixed parameters; parameter draws need the fit's own estimates")
    sigma = np.asarray(covariance, float)
    index = [names.index(n) for n in free]
    sigma = sigma[np.ix_(index, index)] if sigma.shape == (len(names), len(names)) else np.full((1, 1), np.nan)
    if not np.all(np.isfinite(sigma)):
        raise SmleInputError("parameter_draws needs the fit's covariance of the estimates, and this fit has none "
                             "(its Hessian was not positive definite or not finite); accepted: parameter_draws = 0")
    jacobian = np.asarray(_compiled_jacobian(restriction)(jnp.asarray(u_hat)), float)
    inverse = np.linalg.inv(jacobian)
    c = inverse @ sigma @ inverse.T
    return restriction, u_hat, (c + c.T) / 2.0


WIDE_SD = 3.0
"""An unconstrained standard deviation above this (rule of thumb, ours) means draws within two
standard deviations already span most of the parameter's region (a factor e^12 for a log-scale
parameter, 0.0025 to 0.9975 of a logistic one): the normal law is a poor guide there."""


def parameter_sample(model: Model, params: dict, covariance, fixed, n_draws: int,
                     seed: int) -> tuple[list[dict], str]:
    """``(sample, note)``: ``n_draws`` parameter vectors (natural, by name) from N(u_hat, C) on the
    unconstrained scale (:func:`unconstrained_law`), mapped back, a function of ``seed`` (stream 0
    of :func:`sub_seed`); ``note`` is "" or a warning naming the free parameters whose
    unconstrained standard deviation exceeds :data:`WIDE_SD` (weakly identified, typically an
    estimate near the edge of its region: the draws then reach that edge)."""
    restriction, u_hat, c = unconstrained_law(model, params, covariance, fixed)
    wide = [f"{n} (sd {sd:.3g})" for n, sd in zip(restriction.free_names, np.sqrt(np.diag(c))) if sd > WIDE_SD]
    note = "" if not wide else (
        f"the estimates' normal law is wide on the unconstrained scale for {', '.join(wide)}: draws reach the edges "
        "of the admissible region and can dominate the pooled forecast; a longer sample, or holding the parameter "
        "fixed, gives a law the normal approximation describes")
    values, vectors = np.linalg.eigh(c)
    root = vectors * np.sqrt(np.clip(values, 0.0, None))  # C = root root'; tolerates a semi-definite C
    normal = np.random.default_rng(sub_seed(seed, 0)).standard_normal((n_draws, u_hat.size))
    drawn = jax.vmap(compiled_natural(restriction))(jnp.asarray(u_hat[None, :] + normal @ root.T))
    columns = {n: np.asarray(v, float) for n, v in drawn.items()}
    return [{n: float(columns[n][i]) for n in model.param_names} for i in range(n_draws)], note


def draw_sizes(n_paths: int, n_draws: int) -> list[int]:
    """Paths per parameter draw: n_paths split as evenly as possible, the first ones one larger."""
    base, extra = divmod(n_paths, n_draws)
    return [base + (i < extra) for i in range(n_draws)]


def cluster_mean_se(paths: np.ndarray, sizes) -> np.ndarray:
    """Standard error of the pooled mean of ``paths`` (H, n) per row, the paths of one parameter
    draw (consecutive, ``sizes`` of them) forming one cluster: sqrt(N / (N - 1) sum_i m_i^2
    (b_i - b)^2) / n with b_i the draw means and b the pooled mean (the cluster-robust variance
    of a mean; e.g. Cameron and Miller 2015, J. Human Resources 50, recalled from memory). Paths
    of one draw share its parameters, so the independent-paths error sd / sqrt(n) understates."""
    sizes = np.asarray(sizes, int)
    ends = np.cumsum(sizes)
    sums = np.add.reduceat(np.asarray(paths, float), ends - sizes, axis=1)  # (H, N)
    n, count = ends[-1], sizes.size
    pooled = sums.sum(axis=1, keepdims=True) / n
    deviations = sums - sizes[None, :] * pooled  # m_i (b_i - b)
    return np.sqrt(count / (count - 1) * np.sum(deviations**2, axis=1)) / n
