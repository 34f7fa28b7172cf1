"""Units of returns and variances, and the column suffixes that state them.

smle works with log returns. In ``"percent"`` (the default) a log return of 0.01 is 1.0 and
a variance is in percent squared; in ``"decimal"`` the log return is 0.01 and the variance is
in its natural unit. Column names carry the unit: ``_pct`` / ``_pct2`` or ``_dec`` / ``_dec2``.
"""

from __future__ import annotations

from smle.errors import SmleInputError

SCALES = {"percent": 100.0, "decimal": 1.0}
SUFFIXES = {"percent": "pct", "decimal": "dec"}


def scale(unit: str) -> float:
    """The factor from a natural log return to ``unit``."""
    if unit not in SCALES:
        raise SmleInputError(f"unit={unit!r} is not accepted; use 'percent' or 'decimal'")
    return SCALES[unit]


def return_name(stem: str, unit: str) -> str:
    """Column name of a return in ``unit``, e.g. ``return_pct``."""
    scale(unit)
    return f"{stem}_{SUFFIXES[unit]}"


def variance_name(stem: str, unit: str) -> str:
    """Column name of a variance in ``unit`` squared, e.g. ``parkinson_pct2``."""
    scale(unit)
    return f"{stem}_{SUFFIXES[unit]}2"


def describe_units(unit: str) -> dict:
    """The ``attrs`` entries that state the units of a daily table."""
    scale(unit)
    if unit == "percent":
        return {"return_unit": "percent log return (0.01 log change = 1.0)",
                "variance_unit": "percent squared"}
    return {"return_unit": "log return (natural units)", "variance_unit": "log return squared"}
