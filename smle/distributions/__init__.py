"""Log-densities, moments and quantiles of the laws smle's models are built from.

Every function here is pure JAX in float64, broadcasts over its arguments like a NumPy
ufunc, can be jitted and vmapped, and is differentiable in all its real arguments (gradients
are finite in the admissible region). None of them checks its parameters: outside the
admissible region documented in each docstring the result is undefined (typically NaN).
Callers validate parameters before they get here.

Contents:

* modified Bessel functions of the second kind, ``log K0`` and ``log K1`` (and their
  exponentially scaled forms), accurate to a few units of float64 rounding for all
  ``z > 0``;
* the normal inverse Gaussian (NIG) law of Barndorff-Nielsen (1997): log-density and the
  first four moments;
* the inverse Gaussian (IG) law in the (mean, shape) parameterisation: log-density, log-CDF,
  log-survival function, CDF and a quantile function with exact derivatives, plus the map
  of a standard normal value to the IG value at the same probability level;
* the Student-t law: log-density in (location, scale, degrees of freedom) and a
  unit-variance variant;
* a fast standard normal CDF.

One module per family: :mod:`~smle.distributions.bessel`, :mod:`~smle.distributions.nig`,
:mod:`~smle.distributions.normal`, :mod:`~smle.distributions.inverse_gaussian`,
:mod:`~smle.distributions.student_t`; every public name is importable from here.

References:
  Abramowitz, M. and Stegun, I. A. (1964). Handbook of Mathematical Functions. National
  Bureau of Standards. (9.6.11, 9.6.13 and 9.6.24 for the Bessel K functions; 6.1.40 and
  23.1 for the log-gamma expansion.)
  Barndorff-Nielsen, O. E. (1997). Normal inverse Gaussian distributions and stochastic
  volatility modelling. Scandinavian Journal of Statistics 24, 1-13.
  Chhikara, R. S. and Folks, J. L. (1989). The Inverse Gaussian Distribution. Marcel Dekker.
  Trefethen, L. N. and Weideman, J. A. C. (2014). The exponentially convergent trapezoidal
  rule. SIAM Review 56, 385-458.
"""

from smle.distributions.bessel import log_bessel_k0, log_bessel_k0e, log_bessel_k1, log_bessel_k1e
from smle.distributions.inverse_gaussian import (
    inverse_gaussian_cdf, inverse_gaussian_log_cdf, inverse_gaussian_log_density, inverse_gaussian_log_sf,
    inverse_gaussian_quantile, normal_to_inverse_gaussian,
)
from smle.distributions.nig import NigMoments, nig_log_density, nig_moments
from smle.distributions.normal import normal_cdf
from smle.distributions.student_t import standardized_student_t_log_density, student_t_log_density

__all__ = [
    "log_bessel_k0",
    "log_bessel_k1",
    "log_bessel_k0e",
    "log_bessel_k1e",
    "NigMoments",
    "nig_log_density",
    "nig_moments",
    "inverse_gaussian_log_density",
    "inverse_gaussian_log_cdf",
    "inverse_gaussian_log_sf",
    "inverse_gaussian_cdf",
    "inverse_gaussian_quantile",
    "normal_to_inverse_gaussian",
    "normal_cdf",
    "student_t_log_density",
    "standardized_student_t_log_density",
]
