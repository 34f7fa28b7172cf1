"""The result of :func:`smle.loglik`: :class:`LoglikResult`, a log-likelihood with its accuracy
diagnostics (exact, closed-form or simulated)."""

from __future__ import annotations

import dataclasses

import numpy as np

from smle.errors import SmleInputError


@dataclasses.dataclass(frozen=True)
class LoglikResult:
    """A simulated log-likelihood with its accuracy diagnostics.

    Attributes:
      value: EIS estimate of log L (natural log, summed over periods).
      nse: numerical standard error of ``value`` (see ``nse_method``): the largest of the
        delta-method, log-normal and between-batch estimates from this run's weights (with
        antithetic draws, over the independent pairs); with control variates, the corrected NSE.
      ess: effective sample size of the scoring weights, (sum w)^2 / sum w^2.
      iterations: EIS iterations used after the Newton start.
      converged: whether the last relative change of the auxiliary parameters was at most ``tol``
        (by default 1e-2: a sampler close enough to the EIS fixed point for the scoring set,
        not the fixed point to many digits; see ``smle.engine.sampler.TOL``).
      last_change: largest relative change of the auxiliary parameters at the last iteration.
      n_draws, antithetic, seed: the estimator settings used.
      log_weights: log importance weights of the scoring paths, shape (S,).
      paths: the scoring paths of the latent state, shape (T, S) (or (T, S, k) for a
        k-dimensional state).
      b_obs, c_obs: fitted auxiliary parameters, shape (T,) (for k > 1: (T, k), and (T, m) the
        entries of C on the model's basis pairs; for a transition that uses the data, the x_t
        terms of each period's quadratic in (x_{t-1}, x_t), see :mod:`smle.engine.eis_pairs`).
      r_squared: per-period R^2 of the final EIS regressions, shape (T,).
      n_score_draws: paths in the scoring set (``log_weights`` and ``paths`` have this many).
      control_variates: the control variates applied (None, "independent", "draws" or "both");
        with any, ``value`` and ``nse`` are the corrected ones.
      value_uncorrected, nse_uncorrected: the plain EIS estimate and its NSE.
      cv_coefficients: the control-variate coefficients by name ("independent", "draws_he2", ...).
      independent_error: with the independent control, the EIS estimate at the independent
        parameters minus its exact value, with the same random numbers (the error corrected for).
      method: how ``value`` was computed: "EIS"; "exact" (a one-dimensional state: the Kalman
        filter or the checked grid filter, see ``exact_engine``); or "closed form" for a model
        without a latent state. For "exact" and "closed form" ``nse`` is 0, no draws were made
        and the draw fields are empty.
      nse_method: how ``nse`` was computed; it ends with "(not trusted: ...)" when not
        ``nse_trusted``.
      k_hat: the Pareto k-hat of the scoring weights (:func:`smle.pareto_tail.pareto_k_hat`,
        Vehtari et al. 2024), None with fewer than 100 scoring weights or when every weight is
        equal (an exact sampler).
      nse_trusted: False when ``k_hat`` is at or above :data:`K_HAT_UNTRUSTED` (1): the tail fit
        then finds no finite mean of the weights, and :func:`loglik` warns. A single run's k-hat
        is noisy (an ML fit to 68 of 512 weights) and says what the design is like: measured
        against the exact value, the designs where the flag fired on most runs had errors 1.7-2.1
        times their NSE (rms), the design where it never fired 1.05
        (experiments/results/nse_tail.md).
      scoring: "paths" (importance weights of whole paths) or "particles" (particle EIS, see
        :func:`loglik`); with "particles" ``log_weights`` are the particles' normalised log weights
        at the last period, ``paths`` is empty (T, 0), ``ess`` is the mean over periods of the
        ESS of the incremental weights, ``k_hat`` is None and ``resamplings`` counts the periods
        after which the particles were resampled.
    """

    value: float
    nse: float
    ess: float
    iterations: int
    converged: bool
    last_change: float
    n_draws: int
    antithetic: bool
    seed: int
    log_weights: np.ndarray
    paths: np.ndarray
    b_obs: np.ndarray
    c_obs: np.ndarray
    r_squared: np.ndarray
    n_score_draws: int | None = None
    control_variates: str | None = None
    value_uncorrected: float | None = None
    nse_uncorrected: float | None = None
    cv_coefficients: dict | None = None
    independent_error: float | None = None
    method: str = "EIS"
    nse_method: str = "delta"
    nse_estimates: dict | None = None
    log_weight_sd: float | None = None
    repairs: tuple = ()
    failed_regressions: int = 0
    damping_step: float = 1.0
    error_bound: float | None = None
    exact_engine: str | None = None
    log_predictive: np.ndarray | None = None
    filtered_mean: np.ndarray | None = None
    filtered_sd: np.ndarray | None = None
    k_hat: float | None = None
    nse_trusted: bool = True
    scoring: str = "paths"
    resamplings: int | None = None

    @property
    def value_bias_corrected(self) -> float:
        """``value + nse^2 / 2``: the first-order bias correction of log mean w (Durbin and Koopman 1997)."""
        return self.value + 0.5 * self.nse**2

    def smoothed_mean(self) -> np.ndarray:
        """Posterior mean of the latent state per period from the weighted scoring paths: (T,),
        or (T, k) for a k-dimensional state. (An exact result has no paths: use
        ``smle.filter_factor`` for its smoothed factor.)"""
        if self.method != "EIS" or self.scoring != "paths":
            what = f"method {self.method!r}" if self.method != "EIS" else "scoring 'particles'"
            keep = "scoring='paths' keeps them, and " if self.method == "EIS" else ""
            raise SmleInputError(f"a result of {what} has no simulated paths; {keep}smle.filter_factor "
                                 "gives the smoothed factor")
        w = np.exp(self.log_weights - self.log_weights.max())
        return np.tensordot(self.paths, w / w.sum(), axes=([1], [0]))

    def __repr__(self) -> str:
        if self.method == "closed form":
            return f"LoglikResult(value={self.value:.4f}, nse=0, method='closed form')"
        if self.method == "exact":
            return (f"LoglikResult(value={self.value:.4f}, method='exact', {self.exact_engine}, "
                    f"error_bound={self.error_bound:.1e})")
        flag = "converged" if self.converged else "NOT converged"
        control = f", control_variates={self.control_variates!r}" if self.control_variates else ""
        if self.scoring == "particles":
            return (f"LoglikResult(value={self.value:.4f}, nse={self.nse:.4f}, scoring='particles', "
                    f"{self.log_weights.shape[0]} particles, {self.resamplings} resamplings, {flag} in "
                    f"{self.iterations} iterations)")
        tail = "" if self.k_hat is None else f", k_hat={self.k_hat:.2f}{'' if self.nse_trusted else ' (nse not trusted)'}"
        return (
            f"LoglikResult(value={self.value:.4f}, nse={self.nse:.4f}, ess={self.ess:.1f}/{self.log_weights.shape[0]}"
            f"{tail}{control}, {flag} in {self.iterations} iterations)"
        )
