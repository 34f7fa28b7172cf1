"""The error smle raises for bad input: it names the argument, the value and what is accepted."""

from __future__ import annotations


class SmleInputError(ValueError):
    """Bad input to an smle function (data, parameters or settings)."""


def describe(value) -> str:
    """A short printable form of a bad value for error messages."""
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


class EISBreakdownError(FloatingPointError):
    """The simulated likelihood cannot be trusted at these parameters (a collapsed or failed
    importance sampler whose error is not measurable), and no repair helped; the message says
    what was measured."""
