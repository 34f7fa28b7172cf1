"""Trading sessions in intraday data: clock times, the sampling interval, the session the
data usually keep (inferred when not given), and the refusal of daily data where intraday
data are needed (used by :func:`smle.data.prepare_daily`)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from smle.errors import SmleInputError, describe


DAY_NS = 86_400 * 10**9


def clock_seconds(text: str, argument: str) -> float:
    """Seconds after midnight of a clock time ``"HH:MM"`` or ``"HH:MM:SS"``."""
    try:
        parts = [float(part) for part in str(text).split(":")]
        if not 2 <= len(parts) <= 3:
            raise ValueError
        hours, minutes, seconds = (parts + [0.0])[:3]
        if not (0 <= hours < 24 and 0 <= minutes < 60 and 0 <= seconds < 60):
            raise ValueError
    except ValueError:
        raise SmleInputError(
            f"{argument}={describe(text)} is not a clock time; use 'HH:MM' or 'HH:MM:SS' "
            f"(24-hour, venue time)") from None
    return hours * 3600.0 + minutes * 60.0 + seconds


def interval_seconds(interval, session_seconds: float) -> float:
    try:
        seconds = pd.Timedelta(interval).total_seconds()
    except (ValueError, TypeError):
        raise SmleInputError(
            f"interval={describe(interval)} is not a duration; use e.g. '5min', '30s', '1h'"
        ) from None
    if not 0 < seconds <= session_seconds:
        raise SmleInputError(
            f"interval={interval!r} must be positive and at most the session length "
            f"({session_seconds / 60:g} min)")
    return seconds


def clock_text(seconds: float) -> str:
    whole = int(round(seconds))
    hours, rest = divmod(whole, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours:02d}:{minutes:02d}" + (f":{secs:02d}" if secs else "")


def day_runs(day_number: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """First and last row of each run of equal day numbers (data are sorted in time)."""
    starts = np.flatnonzero(np.r_[True, day_number[1:] != day_number[:-1]])
    ends = np.r_[starts[1:], len(day_number)] - 1
    return starts, ends


def mode(values: np.ndarray, latest: bool = False) -> float:
    """The most common value; among equally common ones the earliest (or the latest), so
    that a tie widens the session rather than cutting a day short."""
    found, counts = np.unique(values, return_counts=True)
    tied = found[counts == counts.max()]
    return float(tied[-1] if latest else tied[0])


def usual_session(day_number: np.ndarray, clock: np.ndarray, bars: bool) -> tuple[float, float]:
    """The data's own session, in seconds after midnight: the most common minute of a day's
    first row (for bars stamped at their end, less the most common bar length) and of its
    last row (rounded up to the minute)."""
    starts, ends = day_runs(day_number)
    first = np.floor(clock[starts] / 60.0) * 60.0
    if bars:
        same_day = day_number[1:] == day_number[:-1]
        gaps = np.diff(clock)[same_day]
        gaps = gaps[gaps > 0]
        if len(gaps):
            first = np.maximum(np.floor((clock[starts] - mode(gaps)) / 60.0) * 60.0, 0.0)
    last = np.minimum(np.ceil(clock[ends] / 60.0) * 60.0, 86_400.0 - 1.0)
    return mode(first), mode(last, latest=True)


def refuse_daily(day_number: np.ndarray, clock: np.ndarray, source: str | None) -> None:
    """Intraday preparation needs several rows per day: one a day means daily data."""
    starts, _ = day_runs(day_number)
    if len(starts) > 1 and len(starts) == len(day_number):
        where = f" in {source}" if source is not None else ""
        at = "midnight" if not clock.any() else "one time a day"
        raise SmleInputError(
            f"source{where} has one row per date ({len(starts)} dates, at {at}): these are "
            f"daily data, and intraday preparation needs several rows per day. Use "
            f"prepare_from_daily, or prepare_file(kind='daily') (command line: smle prepare "
            f"--kind daily, or the default --kind auto)")
