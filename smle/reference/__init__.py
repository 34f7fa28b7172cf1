"""Exact (deterministic) likelihood references that the simulated estimators are checked against.

* :func:`kalman_loglik` / :func:`kalman_filter` / :func:`kalman_smoother`: linear Gaussian models (Kalman 1960; Durbin and
  Koopman 2012, chapters 2 and 5), with an exact diffuse start for the random walk.
* :func:`grid_loglik` / :func:`grid_filter`: any model with a univariate stationary latent state,
  by a deterministic grid (quadrature) filter (Kitagawa 1987, JASA 82).
* :func:`grid2d_loglik`: models whose state is two independent AR(1) components
  (``sv-2factor``), by a two-dimensional grid filter.
* :func:`kalman_loglik_var`: a k-dimensional Gaussian VAR(1) state observed with Gaussian noise.
* :func:`log_integral_adaptive`: adaptive Gauss-Hermite quadrature for one-dimensional
  integrals (Liu and Pierce 1994, Biometrika 81).
"""

from smle.reference.grid import GridFilterOutput, grid_filter, grid_loglik
from smle.reference.grid2d import grid2d_loglik
from smle.engine.kalman import KalmanOutput, kalman_filter, kalman_loglik, kalman_smoother
from smle.reference.kalman_var import kalman_loglik_var
from smle.engine.quadrature import log_integral_adaptive

__all__ = [
    "GridFilterOutput",
    "KalmanOutput",
    "grid_filter",
    "grid_loglik",
    "grid2d_loglik",
    "kalman_filter",
    "kalman_loglik",
    "kalman_loglik_var",
    "kalman_smoother",
    "log_integral_adaptive",
]
