"""Row-level checks on price data: each broken rule raises an error naming the row, or, when
the caller asked for it with ``repair="drop"``, the row is repaired, logged and recorded.

Every check here works on whole columns at once (NumPy masks), so it costs little even on
hundreds of thousands of rows. Rows are named by their *position* among the data rows as
read (0-based, header not counted; for a CSV file the line number is shown too) and by their
timestamp or date, so a user can find them in the original file even after sorting or
dropping.
"""

from __future__ import annotations

import logging
from typing import NamedTuple

import numpy as np
import pandas as pd

from smle.errors import SmleInputError, describe

logger = logging.getLogger("smle.data")

REPAIR_CHOICES = ("raise", "drop")

# Command-line flags of the Python arguments that messages suggest, so that a message reads
# right from Python and from ``smle prepare`` (smle/cli/app.py). "--price-column" is the
# name proposed for the flag still to be added there.
COMMAND_LINE_FLAGS = {"repair": "--drop-bad-rows", "session_open": "--session-open",
                      "session_close": "--session-close", "timezone": "--timezone",
                      "interval": "--interval", "kind": "--kind",
                      "price_column": "--price-column"}


def suggest(argument: str, python_value: str, flag_value: str = "") -> str:
    """An argument as both interfaces spell it: ``repair='drop' (command line:
    --drop-bad-rows)``; only the Python form when no flag exists."""
    flag = COMMAND_LINE_FLAGS.get(argument)
    if flag is None:
        return f"{argument}={python_value}"
    return f"{argument}={python_value} (command line: {flag}{' ' + flag_value if flag_value else ''})"


DROP_HINT = suggest("repair", "'drop'")

# The name of the hidden column that carries each row's original position through sorting
# and dropping. It never appears in returned frames.
POSITION = "_smle_position"


class Repair(NamedTuple):
    """One repair made because the caller passed ``repair="drop"``.

    Attributes:
      rule: the rule the row broke, in words (for example ``"price must be positive"``).
      action: what was done: ``"dropped row"``, ``"sorted"``, ``"dropped day"``.
      position: the row's 0-based position among the input's data rows (for a dropped day,
        the position of its first row).
      label: the row's timestamp or date as text.
      detail: the offending value(s) as text.
    """

    rule: str
    action: str
    position: int
    label: str
    detail: str


def check_repair(repair: str) -> str:
    """Validate the ``repair`` argument."""
    if repair not in REPAIR_CHOICES:
        raise SmleInputError(
            f"repair={repair!r} is not accepted; use 'raise' (default: stop at the first bad "
            f"row) or 'drop' (drop or sort bad rows, logged and recorded)")
    return repair


def positive_integer(value, argument: str) -> int:
    """An integer argument of at least 1, or a clear error."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
        raise SmleInputError(f"{argument}={describe(value)} is not accepted; use a positive "
                             f"integer (1, 2, ...)")
    return int(value)


def flag(value, argument: str) -> bool:
    """A true/false argument, or a clear error (a string such as 'no' would count as true)."""
    if not isinstance(value, (bool, np.bool_)):
        raise SmleInputError(f"{argument}={describe(value)} is not accepted; use True or False")
    return bool(value)


def row_name(position: int, label, source: str | None) -> str:
    """How a row is named in messages: its position, its file line and its key."""
    where = f"row {int(position)} (0-based data row"
    if source is not None:
        # Line 1 of the file is the header, so data row 0 is on line 2.
        where += f"; line {int(position) + 2} of {source}"
    return f"{where}; {label})"


class RowChecker:
    """Applies row rules to a frame that carries original positions in column ``POSITION``.

    Args:
      repair: ``"raise"`` or ``"drop"``.
      source: the file name for messages, or ``None`` for an in-memory frame.
      key_name: what the row key is called in messages (``"timestamp"``, ``"date"``).
    """

    def __init__(self, repair: str, source: str | None, key_name: str):
        self.repair = check_repair(repair)
        self.source = source
        self.key_name = key_name
        self.repairs: list[Repair] = []
        self.notes: list[str] = []

    def label(self, key) -> str:
        if isinstance(key, pd.Timestamp) and key.tz is None and key == key.normalize():
            key = key.date()  # a plain date reads better than "... 00:00:00"
        return f"{self.key_name} {key}"

    def apply(self, frame: pd.DataFrame, bad: np.ndarray, rule: str, detail_of,
              hint: str = "") -> pd.DataFrame:
        """Raise on the first row where ``bad`` is true, or drop all such rows and record them.

        Args:
          frame: the rows, with original positions in ``POSITION``, keyed by the index.
          bad: boolean mask over the rows.
          rule: the rule broken, in words.
          detail_of: function of the row's integer location giving the bad value as text.
          hint: extra advice appended to the error message.
        """
        bad = np.asarray(bad, dtype=bool)
        if not bad.any():
            return frame
        locations = np.flatnonzero(bad)
        positions = frame[POSITION].to_numpy()
        if self.repair == "raise":
            first = locations[0]
            others = len(locations) - 1
            more = ""
            if others:
                shown = ", ".join(str(int(positions[i])) for i in locations[1:6])
                more = (f" ({others} more row{'s' if others != 1 else ''} break the same rule, "
                        f"at data row{'s' if others != 1 else ''} {shown}"
                        f"{', ...' if others > 5 else ''})")
            raise SmleInputError(
                f"{row_name(positions[first], self.label(frame.index[first]), self.source)}: "
                f"{detail_of(first)}; rule broken: {rule}{more}. {hint}"
                f"Fix the data, or pass {DROP_HINT} to drop such rows (logged).")
        for location in locations:
            self.repairs.append(Repair(rule, "dropped row", int(positions[location]),
                                       self.label(frame.index[location]), detail_of(location)))
        self._log(rule, "dropped", locations, frame)
        return frame[~bad]

    def record(self, rule: str, action: str, positions, labels, details) -> None:
        """Record repairs made outside :meth:`apply` (sorting, dropping whole days)."""
        for position, label, detail in zip(positions, labels, details):
            self.repairs.append(Repair(rule, action, int(position), str(label), str(detail)))
        if len(positions):
            shown = ", ".join(str(label) for label in list(labels)[:3])
            logger.warning("repair: %s %d row(s) or day(s) breaking rule '%s' (first: %s)",
                           action, len(positions), rule, shown)

    def _log(self, rule, action, locations, frame) -> None:
        shown = ", ".join(
            row_name(frame[POSITION].iat[location], self.label(frame.index[location]), self.source)
            for location in locations[:3])
        logger.warning("repair: %s %d row(s) breaking rule '%s' (first: %s)",
                       action, len(locations), rule, shown)


def check_missing_key(frame: pd.DataFrame, keys: pd.Index, checker: RowChecker,
                      raw: pd.Series) -> tuple[pd.DataFrame, pd.Index]:
    """Rows whose timestamp or date is missing or could not be read."""
    bad = np.asarray(pd.isna(keys))
    if bad.any():
        frame = checker.apply(
            frame, bad, f"every row needs a readable {checker.key_name}",
            lambda i: f"{checker.key_name} {describe(raw.iloc[i])} is missing or unreadable")
        keys = keys[~bad]
    return frame, keys


def check_prices(frame: pd.DataFrame, columns: list[str], checker: RowChecker) -> pd.DataFrame:
    """Prices must be present, finite and positive (logs are taken of them)."""
    for column in columns:
        values = frame[column].to_numpy(dtype=float)
        frame = checker.apply(
            frame, ~np.isfinite(values), f"column '{column}' must hold a number in every row",
            lambda i, c=column, v=values: f"{c} is missing ({float(v[i])!r})")
    for column in columns:
        values = frame[column].to_numpy(dtype=float)
        frame = checker.apply(
            frame, values <= 0.0, f"prices in column '{column}' must be positive",
            lambda i, c=column, v=values: f"{c} = {float(v[i])!r} is not positive")
    return frame


def check_bars(frame: pd.DataFrame, checker: RowChecker) -> pd.DataFrame:
    """Bar consistency: low <= high, and open and close inside [low, high]."""
    high = frame["high"].to_numpy(dtype=float)
    low = frame["low"].to_numpy(dtype=float)
    frame = checker.apply(
        frame, high < low, "the high must not be below the low",
        lambda i: f"high = {float(high[i])!r} is below low = {float(low[i])!r}")
    for column in ("open", "close"):
        if column not in frame:
            continue
        high = frame["high"].to_numpy(dtype=float)
        low = frame["low"].to_numpy(dtype=float)
        value = frame[column].to_numpy(dtype=float)
        frame = checker.apply(
            frame, (value < low) | (value > high),
            f"the {column} must lie inside the bar's range [low, high]",
            lambda i, c=column, v=value, lo=low, hi=high:
                f"{c} = {float(v[i])!r} is outside [low = {float(lo[i])!r}, high = {float(hi[i])!r}]")
    return frame


def key_values(index: pd.Index) -> np.ndarray:
    """Keys as plain numbers for fast comparison (timestamps as int64 nanoseconds)."""
    if isinstance(index, pd.DatetimeIndex):
        return index.as_unit("ns").asi8
    return index.to_numpy()


def check_order(frame: pd.DataFrame, checker: RowChecker) -> pd.DataFrame:
    """Keys must be strictly increasing: neither out of order nor repeated.

    Rows in strictly decreasing order throughout (newest first, as many downloads come) are
    reversed, and a note says so (``checker.notes``). Otherwise, with ``repair="drop"`` rows
    out of order are sorted into place (stable sort, recorded as ``"sorted"``), then later
    rows repeating an earlier key are dropped (the first kept); without it either is an error
    naming the row.
    """
    keys = key_values(frame.index)
    if len(keys) > 2 and np.all(keys[1:] <= keys[:-1]) and keys[-1] < keys[0]:
        checker.notes.append(
            f"rows were in newest-first order ({checker.label(frame.index[0])} first); they "
            f"were reversed to oldest-first")
        frame = frame.iloc[::-1]
        keys = key_values(frame.index)
    positions = frame[POSITION].to_numpy()
    if len(keys) > 1:
        backwards = np.flatnonzero(keys[1:] < keys[:-1]) + 1
        if len(backwards):
            if checker.repair == "raise":
                i = backwards[0]
                raise SmleInputError(
                    f"{row_name(positions[i], checker.label(frame.index[i]), checker.source)}: "
                    f"comes before the previous row's {checker.key_name} "
                    f"{frame.index[i - 1]}; rule broken: rows must be sorted by "
                    f"{checker.key_name}, oldest first ({len(backwards)} such break(s) in all). "
                    f"Sort the data, or pass {DROP_HINT} to sort it (logged).")
            checker.record(f"rows must be sorted by {checker.key_name}", "sorted",
                           positions[backwards], [checker.label(frame.index[i]) for i in backwards],
                           [f"came after {checker.key_name} {frame.index[i - 1]}" for i in backwards])
            frame = frame.iloc[np.argsort(keys, kind="stable")]
            keys = key_values(frame.index)
            positions = frame[POSITION].to_numpy()
    if len(keys) > 1:
        repeated = np.r_[False, keys[1:] == keys[:-1]]
        frame = checker.apply(
            frame, repeated, f"each {checker.key_name} may appear only once",
            lambda i: f"repeats the {checker.key_name} of the row at position "
                      f"{positions[i - 1]}")
    return frame


def check_length(n_rows: int, minimum: int, what: str, source: str | None) -> None:
    """Too short a series."""
    if n_rows < minimum:
        where = f" in {source}" if source is not None else ""
        raise SmleInputError(
            f"{what}{where}: {n_rows} usable, at least {minimum} needed; rule broken: the series "
            f"is too short")
