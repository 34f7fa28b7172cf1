"""The health check's yardstick: each EIS estimate measured against the exact log-likelihood.

Where the latent state is one-dimensional smle computes log L without simulation (the Kalman
filter for a linear Gaussian model, the checked grid filter of :mod:`smle.exact_likelihood`
otherwise); for a k-dimensional state where a reference covers it (a linear Gaussian model: the
k-dimensional Kalman filter; two independent AR(1) components: the two-dimensional grid filter). :func:`reference` computes it once, to ``REFERENCE_TOL``; :func:`compare` measures
the actual error of each seed's estimate, ``e_r = log L_hat_r - log L`` (r = 1..R), and the
statistics that judge it (:mod:`smle.diagnostics.health_findings`):

* Is the reported error honest? If each run's reported NSE ``n_r`` were its true standard error
  and the errors roughly normal and unbiased, then

  - ``R RMSE^2 / NSE^2 ~ chi2_R`` with ``RMSE^2 = mean(e_r^2)`` and ``NSE^2 = mean(n_r^2)`` (the
    centre is the exact value, known, so R degrees of freedom, not R - 1; exact when the n_r are
    equal), so ``RMSE / NSE`` lies in ``[sqrt(chi2_R(a/2) / R), sqrt(chi2_R(1 - a/2) / R)]``
    with probability 1 - a (``a = AGREEMENT_LEVEL``): the pooled ratio;
  - ``sum (e_r / n_r)^2 ~ chi2_R`` exactly, so the root mean square of the standardised errors
    ``z_r = e_r / n_r`` lies in the same interval: each run's own error bar. This is the sharper
    of the two where the runs' NSEs differ widely: with few draws the runs that missed the
    largest weights report a small NSE and carry the largest errors, while one run that caught a
    huge weight reports a huge NSE and props up the pooled ratio (measured: experiments/results/
    check_against_exact.md).

  The pooled ratio above its upper limit: on average the runs' NSE understates their real error
  by more than R seeds explain ('unreliable'); the standardised errors alone above it: single
  runs' error bars cannot be trusted, though pooled they hold ('doubtful'). Below the lower limit
  the NSE overstates the error: conservative, reported only. (A one-sided test at level
  ``AGREEMENT_LEVEL / 2``, 0.5%, per statistic.)
* Is there a bias? ``t = mean(e) / (sd(e) / sqrt(R))`` follows Student's t with R - 1 degrees
  of freedom when the errors have mean zero; ``|t|`` above its two-sided ``AGREEMENT_LEVEL``
  critical value is a significant bias. The log of a mean of weights is biased low by about
  NSE^2 / 2 (Durbin and Koopman 1997), so the error of the bias-corrected mean
  ``mean + sd^2 / 2`` is reported beside it.

References:
  Durbin, J. and Koopman, S. J. (1997). Monte Carlo maximum likelihood estimation for
  non-Gaussian state space models. Biometrika 84, 669-684.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from scipy import stats

from smle.diagnostics.health_report import AGREEMENT_LEVEL
from smle.errors import SmleInputError
from smle.likelihood import loglik

REFERENCE_TOL = 1e-8
"""Accuracy asked of the exact reference (log-likelihood units): far below any EIS error."""

EXACT_SAMPLER_ERROR = 1e-6
"""Largest error (log units) an exact sampler (all weights equal) may show against the reference."""


class ExactComparison(NamedTuple):
    """The EIS estimates of the seed runs against the exact log-likelihood.

    Attributes:
      loglik: the exact log-likelihood; reference: how it was computed (engine and accuracy);
        error_bound: its error bound (0: exact to rounding).
      errors: ``log L_hat_r - log L`` per seed, shape (R,).
      bias: mean error; bias_se: ``sd(errors) / sqrt(R)``; bias_t: ``bias / bias_se``;
        bias_critical: the two-sided ``AGREEMENT_LEVEL`` critical value of t with R - 1 dof.
      rmse: ``sqrt(mean(errors^2))``, the actual error of one run.
      nse: root mean square of the runs' reported NSEs; ratio: ``rmse / nse``.
      z_rms: root mean square of the standardised errors ``errors / reported NSE``.
      honest_range: the ``1 - AGREEMENT_LEVEL`` interval of ``ratio`` and ``z_rms`` under an honest
        NSE, ``sqrt(chi2_R quantiles / R)``.
      corrected_error: error of the bias-corrected mean (``mean + sd^2 / 2`` minus the exact value).
      beyond_two_nse: runs whose error exceeds twice their own reported NSE (about 5% of the runs
        for an honest, normal error).
    """

    loglik: float
    reference: str
    error_bound: float
    errors: np.ndarray
    bias: float
    bias_se: float
    bias_t: float
    bias_critical: float
    rmse: float
    nse: float
    ratio: float
    z_rms: float
    honest_range: tuple
    corrected_error: float
    beyond_two_nse: int

    @property
    def understated(self) -> bool:
        """Whether the pooled NSE understates the actual error beyond what R seeds explain."""
        return self.ratio > self.honest_range[1]

    @property
    def runs_understated(self) -> bool:
        """Whether single runs' NSEs understate their own errors beyond what R seeds explain."""
        return self.z_rms > self.honest_range[1]

    @property
    def biased(self) -> bool:
        """Whether the mean error differs from zero at the two-sided ``AGREEMENT_LEVEL``."""
        return abs(self.bias_t) > self.bias_critical


class ReferenceValue(NamedTuple):
    """An exact log-likelihood of a k-dimensional state (what :func:`compare` reads of a result)."""

    value: float
    error_bound: float


GRID2D_POINTS = ((121, 41), (161, 61))
"""Nodes per component of the two-dimensional grid reference and of its refinement; the change
between them is the reference's error bound (5e-9 on the designs of tests/test_model_sv_2factor.py)."""


def k_dimensional_reference(model, checked, y):
    """``(ReferenceValue or None, note)`` for a state of k > 1 dimensions: the Kalman filter of
    :mod:`smle.reference.kalman_var` for a linear Gaussian model (``gaussian_measurement``), the
    two-dimensional grid filter of :mod:`smle.reference.grid2d` (checked against its refinement)
    for two independent AR(1) components; otherwise none, no grid covering k dimensions."""
    import jax.numpy as jnp

    from smle.reference.grid2d import grid2d_loglik
    from smle.reference.kalman_var import kalman_loglik_var

    values = {k: jnp.asarray(v, float) for k, v in checked.items()}
    measurement = model.gaussian_measurement(values)
    if measurement is not None:
        value = float(kalman_loglik_var(jnp.asarray(y), model.latent_var(values), measurement))
        return ReferenceValue(value, 0.0), "Kalman filter (k-dimensional state), exact to rounding"
    if model.state_dim == 2:
        try:
            coarse, fine = (grid2d_loglik(model, checked, y, points) for points in GRID2D_POINTS)
        except SmleInputError as error:  # components that are not independent
            return None, f"no exact reference: {error}"
        bound = abs(fine - coarse)
        return ReferenceValue(fine, bound), f"two-dimensional grid filter, error bound {bound:.1e}"
    return None, f"no exact reference: {model.state_dim}-dimensional state (no grid covers it)"


def reference(model, checked, y):
    """``(exact LoglikResult or None, note)``: the exact log-likelihood once, or why there is none."""
    if model.state_dim > 1:
        return k_dimensional_reference(model, checked, y)
    try:
        exact = loglik(model, checked, y, method="exact", exact_tol=REFERENCE_TOL)
    except SmleInputError as error:
        return None, f"no exact reference: {error}"
    if exact.method == "closed form":
        return exact, "closed-form log-likelihood"
    bound = f"error bound {exact.error_bound:.1e}" if exact.error_bound else "exact to rounding"
    return exact, f"{exact.exact_engine}, {bound}"


def honest_range(n_seeds: int) -> tuple[float, float]:
    """Two-sided ``1 - AGREEMENT_LEVEL`` interval of RMSE / NSE (centre known) for an honest NSE."""
    low, high = stats.chi2.ppf([AGREEMENT_LEVEL / 2, 1 - AGREEMENT_LEVEL / 2], n_seeds)
    return float(math.sqrt(low / n_seeds)), float(math.sqrt(high / n_seeds))


def compare(values: np.ndarray, single_nse: np.ndarray, exact, note: str) -> ExactComparison:
    """The seed runs' estimates ``values`` with their reported NSEs against the exact result."""
    n_seeds = values.size
    errors = values - exact.value
    sd = float(errors.std(ddof=1))
    bias = float(errors.mean())
    bias_se = sd / math.sqrt(n_seeds)
    bias_t = bias / bias_se if bias_se > 0 else (0.0 if bias == 0 else math.copysign(math.inf, bias))
    rmse = float(np.sqrt(np.mean(errors**2)))
    nse = float(np.sqrt(np.mean(single_nse**2)))
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = rmse / nse if nse > 0 else (1.0 if rmse == 0 else math.inf)
        z = np.where(single_nse > 0, errors / single_nse, np.where(errors == 0, 1.0, math.inf))
    corrected = float(values.mean() + 0.5 * sd**2 - exact.value)
    return ExactComparison(
        loglik=float(exact.value), reference=note, error_bound=float(exact.error_bound or 0.0), errors=errors,
        bias=bias, bias_se=bias_se, bias_t=float(bias_t), bias_critical=float(stats.t.ppf(1 - AGREEMENT_LEVEL / 2,
                                                                                          n_seeds - 1)),
        rmse=rmse, nse=nse, ratio=float(ratio), z_rms=float(np.sqrt(np.mean(z**2))),
        honest_range=honest_range(n_seeds), corrected_error=corrected, beyond_two_nse=int(np.sum(np.abs(z) > 2.0)))
