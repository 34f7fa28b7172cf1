"""Control variates for a simulated log-likelihood: which to apply, the draw statistics, the
coefficients, the correction, and the facts a result reports about them.

The independent control re-runs EIS at ``model.independent_params(params)`` with the same key,
so the fitting and scoring normals are shared, and corrects by the exact likelihood of that case
(``model.independent_loglik``); the draw control uses pooled Hermite statistics of the scoring
normals, of known mean zero. Coefficients come from a least-squares regression of the run's log
weights (antithetic pair means) on the controls' log-scale values (measured against the
alternatives in ``experiments/results/control_variates.md``).
"""

from __future__ import annotations

from typing import Mapping, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from smle.engine import eis
from smle.engine.kernel import eis_output
from smle.engine.sampler import pair_units


CONTROL_VARIATES = (None, "independent", "draws", "both")


class ControlSpec(NamedTuple):
    """Which control variates to apply (static: part of the compiled program's identity).

    Attributes:
      independent: the independent-factor control (EIS at the parameters with the factor
        autocorrelation set to zero, same random numbers, against its exact likelihood).
      draws: the pooled Hermite statistics of the scoring normals.
      coefficient: the independent control's coefficient; None: the run's log-weight regression.
    """

    independent: bool = False
    draws: bool = False
    coefficient: float | None = None

    @property
    def label(self) -> str | None:
        if self.independent and self.draws:
            return "both"
        return "independent" if self.independent else ("draws" if self.draws else None)

    def names(self, antithetic: bool) -> list[str]:
        out = ["independent"] if self.independent else []
        if self.draws:
            out += [f"draws_he{k}" for k in HERMITE_ORDERS[antithetic]]
        return out


HERMITE_ORDERS = {True: (2, 4), False: (1, 2, 3, 4)}
"""Orders of the pooled Hermite statistics used as draw control variates (odd orders vanish in
antithetic pair means, so only even ones are kept with antithetic draws)."""


def draw_statistics(normals: jax.Array, antithetic: bool) -> jax.Array:
    """Pooled Hermite statistics of the scoring normals, shape (S, k), each of exact mean zero.

    ``H_k = sum_t He_k(z_t) / sqrt(T k!)`` with the probabilists' Hermite polynomials
    ``He_1 = z, He_2 = z^2 - 1, He_3 = z^3 - 3z, He_4 = z^4 - 6z^2 + 3``: orthonormal under the
    standard normal law, so every statistic has mean 0 and variance 1.
    """
    z = normals
    z2 = z * z
    polynomials = {1: (z, 1.0), 2: (z2 - 1.0, 2.0), 3: (z2 * z - 3.0 * z, 6.0), 4: (z2 * z2 - 6.0 * z2 + 3.0, 24.0)}
    n_periods = z.shape[0]
    columns = []
    for order in HERMITE_ORDERS[antithetic]:
        values, factorial = polynomials[order]
        columns.append(jnp.sum(values, axis=0) / jnp.sqrt(n_periods * factorial))
    return jnp.stack(columns, axis=1)


def log_weight_coefficients(log_weights: jax.Array, regressors: jax.Array, antithetic: bool) -> jax.Array:
    """Control-variate coefficients: least squares of the log weights on the controls, shape (k,).

    ``regressors`` (S, k) are per-draw control quantities on the log scale (a control case's log
    weights, or statistics of the normals). With antithetic draws the regression is over pair
    means: their odd parts cancel in the estimate, so only the even parts should set the
    coefficients. To first order the error of ``log mean w`` is the mean of the centred log
    weights, so these are the variance-minimising coefficients; log weights are close to jointly
    normal where the weights themselves are heavy-tailed, which makes the regression stable where
    one on the weights is not (measured: see ``experiments/results/control_variates.md``).
    """
    target = pair_units(log_weights, antithetic)
    design = pair_units(regressors, antithetic)
    target = target - jnp.mean(target)
    design = design - jnp.mean(design, axis=0)
    gram = design.T @ design
    # a tiny ridge keeps the solve finite when a control is constant (the exact Gaussian case,
    # where every weight is equal); it changes nothing measurable otherwise
    ridge = 1e-12 * (jnp.trace(gram) / gram.shape[0]) + 1e-300
    return jnp.linalg.solve(gram + ridge * jnp.eye(gram.shape[0], dtype=gram.dtype), design.T @ target)


def control_variate_correction(
    log_weights: jax.Array,
    value: jax.Array,
    controls: jax.Array,
    errors: jax.Array,
    coefficients: jax.Array,
    antithetic: bool,
):
    """Correct ``value = log mean w`` by control variates and give the corrected NSE.

    Each control j has per-draw values ``controls[:, j]`` (shape (S, k)) on the weight scale
    (``w0_s / L0`` for a control case, a statistic of mean zero for the draws), and its estimate
    on these draws is off its known value by ``errors[j]`` on the log scale. The corrected
    estimate is ``value - coefficients . errors``; its NSE is the delta method applied to the
    units of ``w_s / mean(w) - coefficients . controls_s``. The coefficients depend smoothly on
    the parameters, so the corrected value is differentiable like ``value``.

    Returns ``(corrected_value, corrected_nse)``.

    References: Hammersley and Handscomb (1964), Monte Carlo Methods, ch. 5 (control variates);
    Durbin and Koopman (1997), Biometrika 84 (the delta method for log L).
    """
    units = pair_units(jnp.exp(log_weights - value) - controls @ coefficients, antithetic)
    n_units = units.shape[0]
    nse = jnp.std(units, ddof=1) / jnp.sqrt(n_units)
    return value - jnp.dot(coefficients, errors), nse


def controlled_output(model, settings: eis.EISSettings, control: ControlSpec, params: Mapping, y, key, warm=None):
    """EIS evaluation with control variates: ``(out, extra)``, pure and differentiable.

    ``extra`` holds the corrected value and NSE, the coefficients, and with the independent
    control the error of EIS at the independent-factor parameters (same random numbers).
    Without control variates the corrected value is ``out.value``. ``warm`` starts the main
    run's EIS iteration (:func:`smle.engine.kernel.eis_output`).
    """
    out = eis_output(model, settings, params, y, key, warm)
    controls, log_controls, errors, extra = [], [], [], {}
    if control.independent:
        independent = model.independent_params(params)
        out_independent = eis_output(model, settings, independent, y, key)
        exact = model.independent_loglik(params, y)
        error = out_independent.value - exact
        # w0_s / L0 = exp(log w0_s - value0) exp(value0 - log L0): no overflow for any usable run
        controls.append(jnp.exp(out_independent.log_weights - out_independent.value) * jnp.exp(error))
        log_controls.append(out_independent.log_weights)
        errors.append(error)
        extra["independent_error"] = error
    if control.draws:
        _, score_normals = eis.standard_normals(key, out.paths.shape[0], settings)
        statistics = draw_statistics(score_normals, settings.antithetic)
        for j in range(statistics.shape[1]):
            controls.append(statistics[:, j])
            log_controls.append(statistics[:, j])
            errors.append(jnp.mean(statistics[:, j]))
    if controls:
        fixed = [control.coefficient] if control.independent and control.coefficient is not None else []
        target = out.log_weights - (fixed[0] * log_controls[0] if fixed else 0.0)
        free = log_controls[len(fixed):]  # regressed jointly, after any fixed coefficient
        coefficients = jnp.concatenate([
            jnp.asarray(fixed, out.value.dtype),
            log_weight_coefficients(target, jnp.stack(free, axis=1), settings.antithetic) if free
            else jnp.zeros((0,), out.value.dtype),
        ])
        value, nse = control_variate_correction(
            out.log_weights, out.value, jnp.stack(controls, axis=1), jnp.stack(errors), coefficients, settings.antithetic
        )
        extra.update(value=value, nse=nse, coefficients=coefficients)
    else:
        extra["value"] = out.value
    return out, extra


class ControlFacts(NamedTuple):
    """What a result reports about the control variates applied (the one place they are assembled).

    Attributes:
      control_variates: "independent", "draws" or "both".
      value_uncorrected, nse_uncorrected: the plain EIS estimate and its NSE.
      cv_coefficients: the coefficients by name ("independent", "draws_he2", ...).
      independent_error: with the independent control, the EIS estimate at the independent
        parameters minus its exact value (same random numbers); else None.
    """

    control_variates: str
    value_uncorrected: float
    nse_uncorrected: float
    cv_coefficients: dict
    independent_error: float | None


def control_facts(control: ControlSpec, antithetic: bool, out: eis.EISOutput, nse_uncorrected, extra: Mapping):
    """The :class:`ControlFacts` of one controlled evaluation, or None without control variates."""
    if control.label is None:
        return None
    return ControlFacts(
        control_variates=control.label,
        value_uncorrected=float(out.value),
        nse_uncorrected=float(nse_uncorrected),
        cv_coefficients=dict(zip(control.names(antithetic), np.asarray(extra["coefficients"]).tolist())),
        independent_error=float(extra["independent_error"]) if "independent_error" in extra else None,
    )
