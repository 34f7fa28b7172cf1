"""Readers for price files: daily closes or returns, daily open-high-low-close bars, and
intraday prices or bars with timestamps.

Each reader takes a path (CSV; Parquet when pyarrow is installed) or a pandas DataFrame,
picks its columns by argument or by name, checks every row (see :mod:`smle.data.checks`) and
returns a frame with smle's own column names, sorted by its key:

* :func:`read_daily`: index ``date``; column ``close`` (prices) or ``return_pct`` (returns).
* :func:`read_ohlc`: index ``date``; columns ``open``, ``high``, ``low``, ``close``.
* :func:`read_intraday`: index ``timestamp`` (time-zone aware, in the venue's time zone);
  column ``price``, or ``open``, ``high``, ``low``, ``close`` for bars.

What was repaired (only with ``repair="drop"``) is in ``frame.attrs["repairs"]``, a list of
:class:`smle.data.checks.Repair`, and in the ``smle.data`` log. What was inferred without
being an error is in ``frame.attrs["notes"]`` (sentences): the file's encoding, separator or
compression (see :mod:`smle.data.textfile`), day-first dates, and a file in newest-first
order, which is reversed (any other disorder is an error naming the row, or sorted with
``repair="drop"``; a repeated date or timestamp is an error naming the rows). Daily readers
refuse data with several rows per calendar date (intraday prices), naming what to use.
"""

from __future__ import annotations

import datetime

import numpy as np
import pandas as pd

from smle.data import checks, timestamps
from smle.data.tables import load_table
from smle.data.checks import POSITION, RowChecker
from smle.errors import SmleInputError, describe

# None: the clock as the data give it (see read_intraday); naive times are then read as UTC.
DEFAULT_TIMEZONE = None
AS_WRITTEN = "as written in the data (each row's own UTC offset; UTC where none is given)"

_KEY_NAMES = ("timestamp", "datetime", "date_time", "date", "time", "day", "index")
_KEY_FRAGMENTS = ("time", "date")
_PRICE_NAMES = ("price", "close", "last", "settle", "mid")
_PRICE_FRAGMENTS = ("close", "price")
_RETURN_NAMES = ("return", "returns", "log_return", "log_returns", "ret")
_RETURN_FRAGMENTS = ("return",)
BAR_FIELDS = ("open", "high", "low", "close")
_BAR_ALIASES = {"open": ("open", "o", "first"), "high": ("high", "h", "max"),
                "low": ("low", "l", "min"), "close": ("close", "c", "last")}

_RETURN_UNITS = {"percent": 100.0, "decimal": 1.0}


# ---------------------------------------------------------------- loading and columns


def find_column(frame: pd.DataFrame, given: str | None, names, fragments, what: str,
                argument: str, required: bool = True, exclude=()) -> str | None:
    """The column named ``given``, else the first whose name matches ``names`` exactly
    (case and surrounding spaces ignored), else the first containing one of ``fragments``."""
    columns = [column for column in frame.columns if column not in exclude]
    if given is not None:
        if not isinstance(given, (str, int)) or given not in frame.columns:
            raise SmleInputError(
                f"{argument}={given!r} is not a column; the columns are {list(frame.columns)}")
        return given
    normal = {column: str(column).strip().lower().replace(" ", "_") for column in columns}
    for name in names:
        for column in columns:
            if normal[column] == name:
                return column
    for fragment in fragments:
        for column in columns:
            if fragment in normal[column]:
                return column
    if required:
        raise SmleInputError(
            f"no {what} column found among {list(frame.columns)}; name it with "
            f"{checks.suggest(argument, chr(39) + '...' + chr(39), 'NAME')}")
    return None


def _find_key(frame: pd.DataFrame, given: str | None, argument: str) -> str:
    if given is None:
        for column in frame.columns:
            if pd.api.types.is_datetime64_any_dtype(frame[column]):
                return column
    return find_column(frame, given, _KEY_NAMES, _KEY_FRAGMENTS, "date or time", argument)


def _start(frame: pd.DataFrame) -> pd.DataFrame:
    frame = frame.copy()
    frame[POSITION] = np.arange(len(frame))
    return frame


def _finish(frame: pd.DataFrame, checker: RowChecker, columns: list[str]) -> pd.DataFrame:
    out = frame[columns].astype(float)
    out.attrs["positions"] = frame[POSITION].to_numpy()
    out.attrs["repairs"] = list(checker.repairs)
    out.attrs["source"] = checker.source
    out.attrs["notes"] = list(checker.notes)
    return out


def _as_numbers(frame: pd.DataFrame, columns: list[str], checker: RowChecker) -> pd.DataFrame:
    """Columns as floats. Text that is not a number is an error naming the column, the row
    and the text (or, with ``repair="drop"``, the row is dropped); empty cells become NaN and
    are reported by the later checks as missing."""
    for column in columns:
        if pd.api.types.is_bool_dtype(frame[column]):
            raise SmleInputError(f"column {column!r} holds true/false values, not numbers")
        if pd.api.types.is_numeric_dtype(frame[column]):
            continue
        raw = frame[column]
        numbers = pd.to_numeric(raw, errors="coerce")
        text = raw.astype("string").str.strip()
        bad = np.asarray(numbers.isna() & raw.notna() & (text != "").fillna(False), dtype=bool)
        if bad.any():
            total = int(bad.sum())
            frame = checker.apply(
                frame, bad, f"column '{column}' must hold numbers",
                lambda i, r=raw, c=column: f"{c} = {describe(r.iloc[i])} is text, not a number",
                hint=f"{total} of {len(raw)} cells of column '{column}' are text. ")
            numbers = pd.to_numeric(frame[column], errors="coerce")
        frame[column] = numbers
    return frame


# ---------------------------------------------------------------- daily keys

def _daily_keys(frame: pd.DataFrame, key: str, checker: RowChecker) -> pd.DataFrame:
    raw = frame[key]
    if pd.api.types.is_integer_dtype(raw):
        # An integer column (a row number, a trading-day count) is accepted as an ordering key.
        keys = pd.Index(raw.to_numpy(), name="date")
    else:
        keys = pd.DatetimeIndex(timestamps.wall_clock(raw, checker.notes), name="date").as_unit("ns")
        _refuse_intraday(keys, checker.source)
    frame = frame.set_axis(keys)
    frame, keys = checks.check_missing_key(frame, keys, checker, raw.set_axis(keys))
    return frame


def _refuse_intraday(keys: pd.DatetimeIndex, source: str | None) -> None:
    """Daily readers need one row per date: several per date means intraday data."""
    valid = keys[~pd.isna(keys)]
    days = valid.normalize()
    if not days.has_duplicates or (valid == days).all():
        return
    counts = days.value_counts(sort=True)
    busiest = counts.index[0]
    times = valid[days == busiest]
    where = f" in {source}" if source is not None else ""
    raise SmleInputError(
        f"source{where} has several rows per calendar date ({int((counts > 1).sum())} dates; "
        f"{busiest.date()} has {int(counts.iloc[0])} rows, {times.min().time()} to "
        f"{times.max().time()}): these are intraday prices, and a daily reader needs one row "
        f"per date. Use read_intraday, or prepare_daily / prepare_file(kind='intraday') "
        f"(command line: smle prepare --kind intraday, or the default --kind auto)")


def read_daily(source, *, date_column: str | None = None, price_column: str | None = None,
               return_column: str | None = None, returns_in: str = "percent",
               repair: str = "raise", min_rows: int = 2) -> pd.DataFrame:
    """Read daily closing prices, or daily log returns.

    Args:
      source: a CSV or Parquet path, or a DataFrame (a DatetimeIndex is used as the dates).
      date_column: the column of dates; by default the first datetime column, else one named
        like date/day/time. An integer column (e.g. a row number) is accepted as an ordering key.
      price_column: the column of prices; by default one named like price/close/last/settle.
      return_column: read log returns from this column instead of prices. Detected (a column
        named like return) only when no price column is found.
      returns_in: unit of input returns, ``"percent"`` or ``"decimal"`` (log returns either way).
      repair: ``"raise"`` (default) stops at the first bad row; ``"drop"`` drops bad rows and
        sorts rows out of order, logging each repair and recording it in ``attrs["repairs"]``.
      min_rows: fewer usable rows than this is an error (2 prices give 1 return).

    Returns:
      A DataFrame indexed by ``date`` with the column ``close`` (prices), or ``return_pct``
      (log returns in percent) when returns were read.
    """
    min_rows = checks.positive_integer(min_rows, "min_rows")
    frame, source_name = load_table(source)
    checker = RowChecker(repair, source_name, "date")
    checker.notes.extend(frame.attrs.get("notes", []))
    key = _find_key(frame, date_column, "date_column")
    if return_column is None:
        price = find_column(frame, price_column, _PRICE_NAMES, _PRICE_FRAGMENTS, "price",
                            "price_column", required=False, exclude=(key,))
        if price is None:
            return_column = find_column(frame, None, _RETURN_NAMES, _RETURN_FRAGMENTS,
                                        "price (or return)", "price_column",
                                        exclude=(key,))
    elif return_column not in frame.columns:
        raise SmleInputError(
            f"return_column={return_column!r} is not a column; the columns are "
            f"{list(frame.columns)}")
    frame = _start(frame)
    frame = _daily_keys(frame, key, checker)
    if return_column is not None:
        if returns_in not in _RETURN_UNITS:
            raise SmleInputError(
                f"returns_in={returns_in!r} is not accepted; use 'percent' or 'decimal'")
        frame = _as_numbers(frame, [return_column], checker)
        values = frame[return_column].to_numpy(dtype=float)
        frame = checker.apply(frame, ~np.isfinite(values),
                              f"column '{return_column}' must hold a number in every row",
                              lambda i: f"{return_column} is missing ({float(values[i])!r})")
        frame = checks.check_order(frame, checker)
        frame["return_pct"] = frame[return_column] * (100.0 / _RETURN_UNITS[returns_in])
        zero = int(np.count_nonzero(frame["return_pct"].to_numpy() == 0.0))
        if zero:
            checker.notes.append(
                f"{zero} of {len(frame)} returns are exactly zero (an unchanged price, as when "
                f"a holiday is carried as a day without trading); they are kept as "
                f"observations")
        checks.check_length(len(frame), max(min_rows - 1, 1), "daily returns", source_name)
        out = _finish(frame, checker, ["return_pct"])
        out.attrs["return_unit"] = "percent (log return)"
        out.attrs["n_zero_returns"] = zero
        return out
    frame = _as_numbers(frame, [price], checker)
    frame = frame.rename(columns={price: "close"}) if price != "close" else frame
    frame = checks.check_prices(frame, ["close"], checker)
    frame = checks.check_order(frame, checker)
    checks.check_length(len(frame), min_rows, "daily prices", source_name)
    return _finish(frame, checker, ["close"])


def _bar_columns(frame: pd.DataFrame, columns: dict | None, exclude=()) -> dict:
    """Map open/high/low/close to the frame's columns, by argument or by name."""
    if columns is not None and not isinstance(columns, dict):
        raise SmleInputError(
            f"columns={describe(columns)} is not accepted; give a mapping such as "
            f"{{'open': 'Open', 'high': 'High', 'low': 'Low', 'close': 'Last'}}")
    columns = dict(columns or {})
    unknown = set(columns) - set(BAR_FIELDS)
    if unknown:
        raise SmleInputError(
            f"columns={columns!r} has keys {sorted(unknown)}; accepted keys are {BAR_FIELDS}")
    found = {}
    for field in BAR_FIELDS:
        found[field] = find_column(frame, columns.get(field), _BAR_ALIASES[field], (field,),
                                   field, f"columns={{'{field}': ...}}",
                                   exclude=tuple(exclude) + tuple(found.values()))
    return found


def read_ohlc(source, *, date_column: str | None = None, columns: dict | None = None,
              repair: str = "raise", min_rows: int = 2) -> pd.DataFrame:
    """Read daily open-high-low-close bars.

    Args:
      source: a CSV or Parquet path, or a DataFrame.
      date_column: as in :func:`read_daily`.
      columns: optional mapping from ``"open"``, ``"high"``, ``"low"``, ``"close"`` to the
        frame's column names; fields not given are found by name (open/high/low/close).
      repair: ``"raise"`` or ``"drop"``, as in :func:`read_daily`.
      min_rows: fewer usable days than this is an error.

    Returns:
      A DataFrame indexed by ``date`` with columns ``open``, ``high``, ``low``, ``close``
      (prices, all checked: positive, low <= high, open and close inside [low, high]).
    """
    min_rows = checks.positive_integer(min_rows, "min_rows")
    frame, source_name = load_table(source)
    checker = RowChecker(repair, source_name, "date")
    checker.notes.extend(frame.attrs.get("notes", []))
    key = _find_key(frame, date_column, "date_column")
    mapping = _bar_columns(frame, columns, exclude=(key,))
    frame = _start(frame)
    frame = _daily_keys(frame, key, checker)
    frame = _as_numbers(frame, list(mapping.values()), checker)
    frame = frame.rename(columns={value: field for field, value in mapping.items()})
    frame = checks.check_prices(frame, list(BAR_FIELDS), checker)
    frame = checks.check_bars(frame, checker)
    frame = checks.check_order(frame, checker)
    checks.check_length(len(frame), min_rows, "daily bars", source_name)
    return _finish(frame, checker, list(BAR_FIELDS))


# ---------------------------------------------------------------- intraday


def read_intraday(source, *, time_column: str | None = None, price_column: str | None = None,
                  columns: dict | None = None, timezone: str | None = DEFAULT_TIMEZONE,
                  source_timezone: str | None = None, bar_timestamp: str = "end",
                  bar_length: str | None = None, repair: str = "raise") -> pd.DataFrame:
    """Read intraday prices or bars with timestamps.

    Args:
      source: a CSV or Parquet path, or a DataFrame.
      time_column: the column of timestamps; by default the first datetime column, else one
        named like timestamp/datetime/time/date.
      price_column: read one price per row from this column (trades or quotes). When not
        given and the frame has high, low and close columns, it is read as bars; otherwise a
        column named like price/close/last is used.
      columns: for bars, an optional mapping as in :func:`read_ohlc`.
      timezone: the venue's time zone (IANA name). Output timestamps are in this zone, and the
        trading session of :func:`smle.data.prepare_daily` is read in it. By default (None)
        the clock is the data's own: time-zone-aware stamps keep their zone, stamps written
        with a UTC offset keep the wall-clock time written (index in UTC, each row's offset
        in ``attrs["utc_offset_ns"]``, int64 nanoseconds), naive stamps are taken as UTC.
      source_timezone: the zone of timestamps written without an offset; by default they are
        taken to be venue time already. Timestamps with an offset are converted exactly.
      bar_timestamp: for bars, whether a bar's timestamp marks its ``"end"`` (default) or its
        ``"start"``. Bars stamped at the start are moved to their end, so that every timestamp
        is the time of the price in ``close``.
      bar_length: the length of a bar (``"1min"``) for ``bar_timestamp="start"``; by default
        the most common gap between bars.
      repair: ``"raise"`` (default) stops at the first bad row; ``"drop"`` drops bad rows,
        sorts rows out of order and drops repeated timestamps (the first is kept), logging
        each repair and recording it in ``attrs["repairs"]``.

    Returns:
      A DataFrame indexed by ``timestamp`` (aware, in ``timezone``), with the column ``price``
      or the columns ``open``, ``high``, ``low``, ``close``. ``attrs`` holds ``kind``
      (``"prices"`` or ``"bars"``), ``timezone``, ``source`` and ``repairs``.
    """
    for name, zone in (("timezone", timezone), ("source_timezone", source_timezone)):
        if zone is not None and not isinstance(zone, (str, datetime.tzinfo)):
            raise SmleInputError(f"{name}={describe(zone)} is not accepted; use an IANA time "
                                 f"zone name such as 'UTC' or 'Europe/London'")
    frame, source_name = load_table(source)
    given_offsets = frame.attrs.get("utc_offset_ns")  # from an earlier read_intraday
    checker = RowChecker(repair, source_name, "timestamp")
    checker.notes.extend(frame.attrs.get("notes", []))
    key = _find_key(frame, time_column, "time_column")
    frame, key = _join_date_and_time(frame, key, time_column, checker)
    bars = False
    lowered = {str(column).strip().lower() for column in frame.columns}
    if price_column is None:
        bars = columns is not None or {"high", "low", "close"} <= lowered
    if bars:
        has_open = "open" in lowered or "open" in (columns or {})
        mapping = (_bar_columns(frame, columns, exclude=(key,)) if has_open
                   else _bar_columns_without_open(frame, columns, key))
    else:
        price = find_column(frame, price_column, _PRICE_NAMES, _PRICE_FRAGMENTS, "price",
                            "price_column", exclude=(key,))
        mapping = {"price": price}
    fields = list(mapping)
    frame, stamps, written = _intraday_stamps(frame, key, timezone, source_timezone, given_offsets, checker)
    frame = _as_numbers(frame, list(mapping.values()), checker)
    frame = frame.rename(columns={value: field for field, value in mapping.items()})
    frame = checks.check_prices(frame, fields, checker)
    if bars:
        frame = checks.check_bars(frame, checker)
    frame = checks.check_order(frame, checker)
    if bars and bar_timestamp != "end":
        frame = _shift_bars(frame, bar_timestamp, bar_length)
    elif bar_timestamp not in ("end", "start"):
        raise SmleInputError(
            f"bar_timestamp={bar_timestamp!r} is not accepted; use 'end' or 'start'")
    checks.check_length(len(frame), 2, "intraday rows", source_name)
    out = _finish(frame, checker, fields)
    out.attrs["kind"] = "bars" if bars else "prices"
    out.attrs["timezone"] = str(timezone) if timezone is not None else (
        str(out.index.tz) if written is None else AS_WRITTEN)
    if written is not None:
        out.attrs["utc_offset_ns"] = written[out.attrs["positions"]]
    return out


def _intraday_stamps(frame, key, timezone, source_timezone, given_offsets, checker):
    """Index ``frame`` by its parsed timestamps in the venue's zone: ``(frame, stamps, written)``,
    ``written`` the UTC offsets as written per row (None when the clock is the zone's own)."""
    frame = _start(frame)
    raw = frame[key]
    stamps = timestamps.parse_timestamps(raw)
    instants = stamps.as_unit("ns").asi8 if stamps.tz is not None else None
    frame = frame.set_axis(stamps.rename("timestamp"))
    frame, stamps = checks.check_missing_key(frame, stamps, checker, raw.set_axis(stamps))
    written = given_offsets if timezone is None else None
    if timezone is None and not pd.api.types.is_datetime64_any_dtype(raw) \
            and stamps.tz is not None:
        # Offsets in the text: keep the clock as written for the session (per original row).
        written = pd.DatetimeIndex(timestamps.wall_clock(raw)).as_unit("ns").asi8 - instants
    stamps = timestamps.to_zone(stamps, timezone, source_timezone)
    frame = frame.set_axis(stamps.rename("timestamp"))
    bad = np.asarray(pd.isna(stamps))
    if bad.any():
        zone = source_timezone or timezone or "UTC"
        frame = checker.apply(
            frame, bad, f"a timestamp without offset must exist, unambiguously, in {zone}",
            lambda i: f"timestamp {raw.iloc[int(frame[POSITION].iat[i])]!r} falls in a "
                      f"daylight-saving change of {zone}")
    return frame, stamps, written


def _join_date_and_time(frame: pd.DataFrame, key, time_column, checker: RowChecker):
    """A file with a date column and a separate clock-time column: the two joined (noted)."""
    names = {str(column).strip().lower(): column for column in frame.columns}
    if time_column is not None or str(key).strip().lower() != "date" or "time" not in names:
        return frame, key
    clock = frame[names["time"]]
    if pd.api.types.is_datetime64_any_dtype(frame[key]) or \
            pd.api.types.is_datetime64_any_dtype(clock):
        return frame, key
    frame = frame.copy()
    frame["_smle_timestamp"] = (frame[key].astype("string").str.strip() + " "
                                + clock.astype("string").str.strip())
    checker.notes.append(f"timestamps joined from the columns {key!r} (dates) and "
                         f"{names['time']!r} (clock times)")
    return frame, "_smle_timestamp"


def _bar_columns_without_open(frame, columns, key) -> dict:
    mapping = {}
    for field in ("high", "low", "close"):
        mapping[field] = find_column(frame, (columns or {}).get(field), _BAR_ALIASES[field],
                                     (field,), field, f"columns={{'{field}': ...}}",
                                     exclude=(key,) + tuple(mapping.values()))
    return mapping


def _shift_bars(frame: pd.DataFrame, bar_timestamp: str, bar_length: str | None):
    if bar_timestamp != "start":
        raise SmleInputError(
            f"bar_timestamp={bar_timestamp!r} is not accepted; use 'end' or 'start'")
    if bar_length is None:
        gaps = np.diff(frame.index.as_unit("ns").asi8)
        gaps = gaps[gaps > 0]
        if not len(gaps):
            raise SmleInputError("bar_length could not be inferred; pass bar_length='1min'")
        values, counts = np.unique(gaps, return_counts=True)
        length = pd.Timedelta(int(values[np.argmax(counts)]), unit="ns")
    else:
        try:
            length = pd.Timedelta(bar_length)
        except ValueError as error:
            raise SmleInputError(
                f"bar_length={bar_length!r} is not a duration such as '1min'") from error
    return frame.set_axis(frame.index + length)
