"""Restricted fits: some parameters held at given values, the others estimated.

A :class:`Restriction` maps the free coordinates of a model's unconstrained parameterisation
to the full natural parameters. It works through the model's own bijection and its
:meth:`~smle.models.base.Model.pin` hook: the fixed parameters' coordinates are set so that
``from_real`` returns their values whatever the free coordinates are, and the fixed values are
then written over the result, so they hold exactly. With per-parameter bijections this is
fixing coordinates; with a joint one (GARCH's alpha + beta < 1 in ``garch``, ``garch-mix``)
the free parameters range over what the fixed ones leave (beta in (0, 1 - alpha) when alpha
is fixed), so every point of the free space is admissible.

:func:`check_fixed` validates the fixed values (names, finite numbers, inside the open
admissible region, joint constraints among the fixed values themselves);
:func:`standard_errors` maps the inverse Hessian in the free coordinates to the natural
parameters (delta method), the fixed ones without a standard error.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from typing import Mapping

import jax
import jax.numpy as jnp
import numpy as np
from scipy.special import ndtri

from smle.errors import SmleInputError, describe
from smle.models import Model


def check_fixed(model: Model, fixed) -> dict[str, float]:
    """``fixed`` (a mapping name -> value, or None) checked against ``model``; floats by name."""
    if fixed is None:
        return {}
    constraints = model.constraints()
    if not isinstance(fixed, Mapping):
        raise SmleInputError(f"fixed = {describe(fixed)} is not accepted; accepted: a mapping from parameter name "
                             f"to value, e.g. {{'{next(iter(constraints))}': 0.0}}")
    out = {}
    for name, raw in fixed.items():
        if name not in constraints:
            raise SmleInputError(f"fixed names {name!r}, which model '{model.name}' does not have; its parameters "
                                 f"are: {', '.join(constraints)}")
        constraint = constraints[name]
        try:
            value = float(np.asarray(raw, dtype=float).reshape(()))
        except (TypeError, ValueError):
            raise SmleInputError(f"fixed['{name}'] = {describe(raw)} is not a real number; accepted: "
                                 f"{constraint.region(name)}") from None
        if not math.isfinite(value) or not constraint.contains(value):
            where = "on the boundary of" if value in (constraint.lower, constraint.upper) else "outside"
            raise SmleInputError(
                f"fixed['{name}'] = {value!r} is {where} the admissible region of model '{model.name}': "
                f"{constraint.region(name)} ({constraint.meaning}); the region is open, so a parameter can be held "
                "only at a value strictly inside it")
        out[name] = value
    if len(out) == len(constraints):
        raise SmleInputError(f"fixed holds every parameter of model '{model.name}'; nothing is left to estimate "
                             "(use smle.loglik to evaluate the likelihood at given values)")
    try:  # a joint constraint among the fixed values alone (a check needing a free value raises KeyError)
        model.check_joint(dict(out))
    except KeyError:
        pass
    return out


@dataclasses.dataclass(frozen=True)
class Restriction:
    """A model with some parameters fixed (hashable: compiled programs are cached on it).

    Attributes:
      model: the model.
      fixed: ``((name, value), ...)`` in the model's parameter order (empty: no restriction).
    """

    model: Model
    fixed: tuple = ()

    @classmethod
    def of(cls, model: Model, fixed: Mapping[str, float]) -> "Restriction":
        return cls(model, tuple((n, float(fixed[n])) for n in model.param_names if n in fixed))

    @property
    def fixed_values(self) -> dict[str, float]:
        return dict(self.fixed)

    @property
    def free_names(self) -> tuple[str, ...]:
        held = self.fixed_values
        return tuple(n for n in self.model.param_names if n not in held)

    @property
    def free_index(self) -> np.ndarray:
        return np.array([self.model.param_names.index(n) for n in self.free_names], dtype=int)

    def unconstrained(self, u_free) -> jnp.ndarray:
        """The model's full unconstrained vector at free coordinates ``u_free``."""
        full = jnp.zeros(len(self.model.param_names), dtype=jnp.result_type(float))
        return self.model.pin(full.at[self.free_index].set(u_free), self.fixed_values)

    def natural(self, u_free) -> dict:
        """Natural parameters (all of them) at free coordinates ``u_free``; fixed ones exact."""
        params = dict(self.model.from_real(self.unconstrained(u_free)))
        params.update({n: jnp.asarray(v, float) for n, v in self.fixed})
        return params

    def free_start(self, start: Mapping[str, float]) -> jnp.ndarray:
        """Free coordinates of admissible start values (the fixed ones are replaced by pinning)."""
        return jnp.asarray(self.model.to_real(start))[self.free_index]


@functools.lru_cache(maxsize=None)
def compiled_natural(restriction: Restriction):
    """:meth:`Restriction.natural`, compiled once per restriction."""
    return jax.jit(restriction.natural)


@functools.lru_cache(maxsize=None)
def _compiled_jacobian(restriction: Restriction):
    """d(free natural parameters) / d(free coordinates), compiled once per restriction."""
    free = restriction.free_names

    def free_values(v):
        params = restriction.natural(v)
        return jnp.stack([params[n] for n in free])

    return jax.jit(jax.jacfwd(free_values))


def standard_errors(restriction, u, params, hessian, level):
    """``(covariance, std_errors, conf_int, problem)`` from the Hessian of minus the log-likelihood
    on the unconstrained scale of the free parameters, mapped by the delta method; ``problem`` is ""
    or why there are none. Fixed parameters get NaN standard errors and intervals and zero rows
    and columns in the covariance (they do not vary)."""
    names, free = restriction.model.param_names, restriction.free_names
    index = [names.index(n) for n in free]
    jacobian = np.asarray(_compiled_jacobian(restriction)(jnp.asarray(u)))
    finite = bool(np.all(np.isfinite(hessian)))
    eigenvalues = np.linalg.eigvalsh(hessian) if finite else np.full(len(free), np.nan)
    z = float(ndtri(0.5 + level / 2))
    std_errors = {n: math.nan for n in names}
    conf_int = {n: (math.nan, math.nan) for n in names}
    if not (finite and np.all(eigenvalues > 0)):
        covariance = np.full((len(names), len(names)), np.nan)
        if finite:
            return covariance, std_errors, conf_int, (
                "the Hessian is not positive definite: not a strict maximum; no standard errors")
        return covariance, std_errors, conf_int, (
            "the Hessian is not finite: no standard errors; the likelihood could not be evaluated "
            "near the estimate, which often means a parameter is at the edge of its region")
    cov_u = np.linalg.inv(hessian)
    covariance = np.zeros((len(names), len(names)))
    covariance[np.ix_(index, index)] = jacobian @ cov_u @ jacobian.T
    se_u = np.sqrt(np.diag(cov_u))
    std_errors.update({n: float(np.sqrt(covariance[i, i])) for n, i in zip(free, index)})
    off_diagonal = np.abs(jacobian - np.diag(np.diag(jacobian))) > 1e-12 * np.abs(jacobian).max()
    for i, n in enumerate(free):
        if not (off_diagonal[i].any() or off_diagonal[:, i].any()):  # the parameter has its own bijection
            # built on the unconstrained scale and mapped back: stays inside the region
            bounds = []
            for sign in (-1.0, 1.0):
                shifted = np.array(u, dtype=float)
                shifted[i] += sign * z * se_u[i]
                bounds.append(float(compiled_natural(restriction)(jnp.asarray(shifted))[n]))
        else:
            # a joint bijection (GARCH stationarity): delta-method interval in the parameter
            bounds = [params[n] - z * std_errors[n], params[n] + z * std_errors[n]]
        conf_int[n] = (min(bounds), max(bounds))
    return covariance, std_errors, conf_int, ""


def estimates_at(restriction, first, hessian, level):
    """``(params, covariance, std_errors, conf_int, converged, message)`` at the optimiser's end."""
    u = first["u"]
    params = {n: float(v) for n, v in compiled_natural(restriction)(jnp.asarray(u)).items()}
    converged, message = convergence(first)
    covariance, std_errors, conf_int, problem = standard_errors(restriction, u, params, hessian, level)
    converged, message = with_hessian(converged, message, problem)
    return params, covariance, std_errors, conf_int, converged, message


def convergence(first) -> tuple[bool, str]:
    """Whether the optimiser converged, and the message saying so or why not."""
    if not math.isfinite(first["grad_norm"]):
        return False, ("not converged: the gradient of the log-likelihood is not finite where the optimiser stopped "
                       f"(after {first['steps']} steps); try other start values")
    if first["grad_norm"] <= first["gtol"]:
        return True, "converged: gradient below tolerance"
    if first["stalled"]:
        return False, (f"not converged: the line search made no progress (max|grad| = {first['grad_norm']:.2e}, "
                       f"tolerance {first['gtol']:.0e}); try other start values or more draws")
    return False, f"not converged: reached max_steps = {first['max_steps']} (max|grad| = {first['grad_norm']:.2e})"


def with_hessian(converged: bool, message: str, problem: str) -> tuple[bool, str]:
    """The optimiser's verdict after the Hessian: a gradient below tolerance is no maximum when the
    Hessian is not positive definite, so flag and message then both say 'not converged'."""
    if not problem:
        return converged, message
    if converged:
        return False, f"not converged: gradient below tolerance, but {problem}"
    return False, f"{message}; also {problem}"
