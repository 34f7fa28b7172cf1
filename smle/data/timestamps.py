"""Timestamps as files write them: parsing text with or without UTC offsets, day-first
detection, the wall clock as written, and conversion to the venue's time zone (used by
:mod:`smle.data.readers`)."""

from __future__ import annotations

import re
import warnings

import numpy as np
import pandas as pd

from smle.errors import SmleInputError


def wall_clock(raw: pd.Series, notes: list[str] | None = None) -> pd.Series:
    """Dates or times as written: a UTC offset at the end of the text is dropped, so that a
    day is the calendar day printed in the file; unreadable entries become NaT.

    Dates such as 06/01/2031 are read month first unless reading them day first leaves fewer
    unreadable, or (all readable both ways) gives ordered dates closer together; the choice
    of day first is noted in ``notes``.
    """
    if pd.api.types.is_datetime64_any_dtype(raw):
        parsed = raw
    else:
        text = _without_offset(raw.astype("string").str.strip())
        parsed = _to_datetime(text, dayfirst=False)
        if _format_of(text) is None and text.str.contains(r"^\d{1,2}[/.]\d{1,2}[/.]",
                                                          regex=True, na=False).any():
            day_first = _to_datetime(text, dayfirst=True)
            if _better_reading(day_first, parsed):
                parsed = day_first
                if notes is not None:
                    notes.append(f"dates such as {text.dropna().iloc[0]!r} were read day "
                                 f"first (day/month/year)")
    if isinstance(parsed.dtype, pd.DatetimeTZDtype):
        parsed = parsed.dt.tz_localize(None)
    return _within_bounds(parsed)


def _within_bounds(parsed):
    """Times outside what nanosecond timestamps hold (years 1678-2261) become NaT, to be
    reported as unreadable rows."""
    low, high = pd.Timestamp("1678-01-01"), pd.Timestamp("2261-12-31")
    if getattr(parsed.dtype, "tz", None) is not None:
        low, high = low.tz_localize("UTC"), high.tz_localize("UTC")
    return parsed.where((parsed >= low) & (parsed <= high))


def _without_offset(text: pd.Series) -> pd.Series:
    """Text with a trailing UTC offset removed; by slicing when every entry ends in an offset
    of the same form (fast on large files), else by a regular expression."""
    present = text.dropna()
    match = _OFFSET_AT_END.search(str(present.iloc[0])) if len(present) else None
    if match is None:
        return text
    width = len(match.group())
    tail = present.str.slice(-width)
    same_form = (present.str.len() == len(str(present.iloc[0]))).all() and (
        (tail == "Z").all() if width == 1 else tail.str.slice(0, 1).isin(["+", "-"]).all())
    if same_form:
        return text.str.slice(0, -width)
    return text.str.replace(_OFFSET_AT_END, "", regex=True)


def _to_datetime(text: pd.Series, dayfirst: bool) -> pd.Series:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # pandas' guess-the-format warnings
        try:
            return pd.to_datetime(text, errors="coerce", format=_format_of(text),
                                  dayfirst=dayfirst)
        except (ValueError, TypeError, OverflowError):
            return pd.to_datetime(text, errors="coerce", utc=True, format=_format_of(text),
                                  dayfirst=dayfirst)


def _better_reading(candidate: pd.Series, current: pd.Series) -> bool:
    """Whether ``candidate`` reads more dates, or as many in order and closer together."""
    missing = (int(candidate.isna().sum()), int(current.isna().sum()))
    if missing[0] != missing[1]:
        return missing[0] < missing[1]

    def spread(values):
        steps = np.diff(values.dropna().to_numpy().astype("datetime64[ns]").astype(np.int64))
        ordered = len(steps) and (np.all(steps >= 0) or np.all(steps <= 0))
        return (0 if ordered else 1, float(np.median(np.abs(steps))) if len(steps) else 0.0)

    return spread(candidate) < spread(current)


def _format_of(text: pd.Series) -> str | None:
    present = text.dropna()
    sample = str(present.iloc[0]).strip() if len(present) else ""
    return "ISO8601" if _ISO_START.match(sample) else None


_OFFSET_AT_END = re.compile(r"(Z|[+-]\d{2}:?\d{2})$")


_ISO_START = re.compile(r"^\d{4}-\d{2}-\d{2}([ T]\d{2}:\d{2}(:\d{2}(\.\d+)?)?)?")


def parse_timestamps(raw: pd.Series) -> pd.DatetimeIndex:
    """Timestamps from a column; unreadable entries become NaT (reported by the caller)."""
    return pd.DatetimeIndex(_within_bounds(pd.Series(_parse_any(raw), index=raw.index)))


def _parse_any(raw: pd.Series):
    if pd.api.types.is_datetime64_any_dtype(raw):
        return pd.DatetimeIndex(raw)
    present = raw.dropna()
    sample = str(present.iloc[0]).strip() if len(present) else ""
    iso = "ISO8601" if _ISO_START.match(sample) else None
    if _OFFSET_AT_END.search(sample):
        # Offsets may change within a file (daylight saving): read instants as UTC, then
        # convert to the venue's zone.
        return pd.DatetimeIndex(pd.to_datetime(raw, errors="coerce", utc=True, format=iso))
    try:
        return pd.DatetimeIndex(pd.to_datetime(raw, errors="coerce", format=iso))
    except (ValueError, TypeError):
        return pd.DatetimeIndex(pd.to_datetime(raw, errors="coerce", utc=True, format=iso))


def to_zone(stamps: pd.DatetimeIndex, timezone: str | None, source_timezone: str | None):
    if timezone is None:
        if stamps.tz is not None:
            return stamps
        timezone = source_timezone or "UTC"
    try:
        if stamps.tz is not None:
            return stamps.tz_convert(timezone)
        zone = source_timezone or timezone
        local = stamps.tz_localize(zone, ambiguous="NaT", nonexistent="NaT")
        return local.tz_convert(timezone)
    except Exception as error:  # unknown zone names come from several libraries
        if "tz" in type(error).__name__.lower() or isinstance(error, (KeyError, ValueError)):
            raise SmleInputError(
                f"timezone={timezone!r} / source_timezone={source_timezone!r}: not a known "
                f"time zone ({error}); use an IANA name such as 'UTC' or 'Europe/London'"
            ) from error
        raise
