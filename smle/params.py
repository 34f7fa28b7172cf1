"""Parameter constraints: the admissible region of each model parameter and its bijection to R.

A model declares one :class:`Constraint` per parameter. The optimiser works on the real line;
the model and the engine see natural values. Checks on user-supplied values live here too, so
every model reports an inadmissible value the same way.
"""

from __future__ import annotations

import math
from typing import Callable, Mapping, NamedTuple

import jax.numpy as jnp
import numpy as np

from smle.errors import SmleInputError, describe


class Constraint(NamedTuple):
    """An open region (lower, upper) with maps to and from the real line.

    Attributes:
      lower, upper: bounds of the open admissible interval (may be infinite).
      to_real: natural value -> unconstrained value.
      from_real: unconstrained value -> natural value.
      meaning: a few words on why the region is what it is (used in error messages).
    """

    lower: float
    upper: float
    to_real: Callable
    from_real: Callable
    meaning: str

    def contains(self, value: float) -> bool:
        return bool(self.lower < value < self.upper)

    def region(self, name: str) -> str:
        if math.isinf(self.lower) and math.isinf(self.upper):
            return f"{name} any finite number"
        if math.isinf(self.upper):
            return f"{name} > {self.lower:g}"
        if math.isinf(self.lower):
            return f"{name} < {self.upper:g}"
        return f"{self.lower:g} < {name} < {self.upper:g}"


def real(meaning: str = "unrestricted") -> Constraint:
    """Any finite real number (identity map)."""
    return Constraint(-math.inf, math.inf, lambda v: v, lambda u: u, meaning)


def positive(meaning: str = "a scale must be positive") -> Constraint:
    """A positive number, mapped by the logarithm."""
    return Constraint(0.0, math.inf, jnp.log, jnp.exp, meaning)


def greater_than(bound: float, meaning: str) -> Constraint:
    """A number above ``bound``, mapped by log(value - bound)."""
    return Constraint(
        float(bound), math.inf, lambda v: jnp.log(v - bound), lambda u: bound + jnp.exp(u), meaning
    )


def interval(lower: float, upper: float, meaning: str) -> Constraint:
    """A number in the open interval (lower, upper), mapped by a scaled logit."""
    width = upper - lower

    def to_real(v):
        p = (v - lower) / width
        return jnp.log(p) - jnp.log1p(-p)

    def from_real(u):
        return lower + width * jax_sigmoid(u)

    return Constraint(float(lower), float(upper), to_real, from_real, meaning)


def jax_sigmoid(u):
    # written out rather than imported so that the module has no dependency on jax.nn's dtype rules
    return 0.5 * (jnp.tanh(0.5 * u) + 1.0)


def check_params(
    model_name: str, constraints: Mapping[str, Constraint], params: Mapping[str, float]
) -> dict[str, float]:
    """Validate a user's parameter mapping against a model's constraints.

    Returns a new dict of Python floats in the model's parameter order. Raises
    :class:`SmleInputError` naming the parameter, its value and its admissible region when a
    name is missing or unknown, a value is not a finite real number, or it lies outside its
    region.
    """
    if not isinstance(params, Mapping):
        raise SmleInputError(
            f"params must be a mapping from parameter name to value for model '{model_name}' "
            f"(names: {', '.join(constraints)}); got {type(params).__name__}"
        )
    unknown = [k for k in params if k not in constraints]
    if unknown:
        raise SmleInputError(
            f"params has names that model '{model_name}' does not know: {', '.join(map(str, unknown))}; "
            f"its parameters are: {', '.join(constraints)}"
        )
    missing = [k for k in constraints if k not in params]
    if missing:
        raise SmleInputError(
            f"params is missing {', '.join(missing)} for model '{model_name}'; "
            f"its parameters are: {', '.join(constraints)}"
        )
    checked = {}
    for name, constraint in constraints.items():
        raw = params[name]
        try:
            value = float(np.asarray(raw, dtype=float).reshape(()))
        except (TypeError, ValueError):
            raise SmleInputError(
                f"params['{name}'] = {describe(raw)} is not a real number; "
                f"accepted: {constraint.region(name)}"
            ) from None
        if not math.isfinite(value) or not constraint.contains(value):
            raise SmleInputError(
                f"params['{name}'] = {value!r} is outside the admissible region of model "
                f"'{model_name}': {constraint.region(name)} ({constraint.meaning})"
            )
        checked[name] = value
    return checked
