"""The error smle raises for bad input: it names the argument, the value and what is accepted."""

from __future__ import annotations


class SmleInputError(ValueError):
    """Bad input to an smle function (data, parameters or settings)."""


def describe(value) -> str:
    """A short printable form of a bad value for error messages."""
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."
