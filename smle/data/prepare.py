"""From price files to the aligned daily table a model fit takes.

:func:`prepare_daily` turns intraday prices or bars into one row per session day with
returns and realized and range-based measures; :func:`prepare_from_daily` does the same for
daily bars or closes; :func:`prepare_file` reads a file, does either and writes the table
(this is the whole job of the ``smle prepare`` command); :func:`write_daily` and
:func:`read_daily_table` store and load a table.

The table is indexed by ``date`` (the session's calendar date in the venue's time zone) and
its columns carry their units (see :mod:`smle.data.units`); with the default unit:

* ``return_pct``: close-to-close log return, percent.
* ``overnight_return_pct``: previous close to today's open, percent.
* ``session_return_pct``: today's open to close, percent (the two add up to ``return_pct``).
* ``realized_variance_pct2``, ``bipower_variation_pct2``,
  ``subsampled_realized_variance_pct2``: over the session, percent squared.
* ``parkinson_pct2``, ``garman_klass_pct2``, ``rogers_satchell_pct2``: from the session's
  open, high, low and close, percent squared.
* ``n_observations``: intraday rows inside the session.

With ``add_overnight=True`` every variance gets the squared overnight return added and its
name the part ``_whole_day`` (``realized_variance_whole_day_pct2``). The first session day
only supplies a previous close and is not a row. ``attrs`` states units, interval, session,
time zone, the number of rows outside the session, and ``repairs``.
"""

from __future__ import annotations

import json
import logging
from pathlib import Path

import numpy as np
import pandas as pd

from smle.data import checks, ranges, readers, realized, units
from smle.data.checks import Repair
from smle.errors import SmleInputError, describe

logger = logging.getLogger("smle.data")

REALIZED_MEASURES = ("realized_variance", "bipower_variation", "subsampled_realized_variance")
RANGE_MEASURES = tuple(ranges.ESTIMATORS)
DEFAULT_MEASURES = REALIZED_MEASURES + RANGE_MEASURES

DEFAULT_SESSION_OPEN = "09:30"
DEFAULT_SESSION_CLOSE = "16:00"
DEFAULT_INTERVAL = "5min"

_DAY_NS = 86_400 * 10**9


def _clock_seconds(text: str, argument: str) -> float:
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


def _interval_seconds(interval, session_seconds: float) -> float:
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


def _check_measures(measures) -> tuple[str, ...]:
    measures = tuple(measures)
    unknown = [name for name in measures if name not in DEFAULT_MEASURES]
    if unknown:
        raise SmleInputError(
            f"measures={measures!r} has unknown names {unknown}; accepted: {DEFAULT_MEASURES}")
    return measures


def prepare_daily(source, interval=DEFAULT_INTERVAL, *, measures=DEFAULT_MEASURES,
                  subsamples: int = 5, add_overnight: bool = False,
                  session_open: str = DEFAULT_SESSION_OPEN,
                  session_close: str = DEFAULT_SESSION_CLOSE,
                  timezone: str = readers.DEFAULT_TIMEZONE, source_timezone: str | None = None,
                  time_column: str | None = None, price_column: str | None = None,
                  columns: dict | None = None, bar_timestamp: str = "end",
                  bar_length: str | None = None, min_observations: int | None = None,
                  min_days: int = 2, unit: str = "percent",
                  repair: str = "raise") -> pd.DataFrame:
    """Daily table of returns and measures from intraday prices or bars.

    Args:
      source: a CSV or Parquet path, or a DataFrame (for instance from
        :func:`smle.data.read_intraday`), with timestamps and prices or bars.
      interval: the sampling interval of the realized measures (default ``"5min"``).
      measures: which measures to compute, from ``DEFAULT_MEASURES`` (all by default).
      subsamples: number of shifted grids averaged by the subsampled realized variance.
      add_overnight: add the squared overnight return to each variance, for a whole-day
        measure (columns then named ``..._whole_day_pct2``).
      session_open, session_close: the trading session, as ``"HH:MM[:SS]"`` clock times in
        ``timezone`` (defaults 09:30 and 16:00). Rows outside it are left out (counted in
        ``attrs["n_outside_session"]`` and logged). Sessions over midnight are not supported.
      timezone: the venue's time zone (default ``"UTC"``); see :func:`read_intraday`.
      source_timezone, time_column, price_column, columns, bar_timestamp, bar_length: passed
        to :func:`smle.data.read_intraday`.
      min_observations: a session with fewer rows than this is an error (or, with
        ``repair="drop"``, dropped); by default one row per sampling interval.
      min_days: fewer usable session days than this is an error (the first day only gives a
        previous close, so the table has ``min_days - 1`` rows at least).
      unit: ``"percent"`` (default) or ``"decimal"`` log returns.
      repair: ``"raise"`` (default) or ``"drop"``, as in :func:`read_intraday`; with
        ``"drop"`` too-sparse days are dropped as well.

    Returns:
      A DataFrame indexed by ``date`` (see the module docstring for its columns and attrs).
    """
    measures = _check_measures(measures)
    scale = units.scale(unit)
    if int(subsamples) < 1:
        raise SmleInputError(f"subsamples={subsamples!r} must be a positive integer")
    open_seconds = _clock_seconds(session_open, "session_open")
    close_seconds = _clock_seconds(session_close, "session_close")
    if close_seconds <= open_seconds:
        raise SmleInputError(
            f"session_close={session_close!r} must be later than session_open="
            f"{session_open!r} on the same day (sessions over midnight are not supported)")
    length = close_seconds - open_seconds
    interval_seconds = _interval_seconds(interval, length)
    n_intervals = int(np.ceil(length / interval_seconds - 1e-9))
    if min_observations is None:
        min_observations = n_intervals

    earlier = list(source.attrs.get("repairs", [])) if isinstance(source, pd.DataFrame) else []
    intraday = readers.read_intraday(
        source, time_column=time_column, price_column=price_column, columns=columns,
        timezone=timezone, source_timezone=source_timezone, bar_timestamp=bar_timestamp,
        bar_length=bar_length, repair=repair)
    source_name = intraday.attrs["source"]
    repairs: list[Repair] = earlier + list(intraday.attrs["repairs"])
    positions = intraday.attrs["positions"]
    bars = intraday.attrs["kind"] == "bars"

    # Venue wall-clock time: whole days and seconds after midnight, straight from int64.
    wall = intraday.index.tz_localize(None).as_unit("ns").asi8
    day_number = wall // _DAY_NS
    clock = (wall - day_number * _DAY_NS) / 1e9
    inside = (clock >= open_seconds) & (clock <= close_seconds)
    n_outside = int(np.count_nonzero(~inside))
    if n_outside:
        logger.warning("%d of %d intraday rows fall outside the session %s-%s (%s) and are "
                       "left out", n_outside, len(inside), session_open, session_close, timezone)
    keep = np.flatnonzero(inside)

    # Too-sparse days: count rows per day (data are sorted, so days are contiguous runs).
    day_kept = day_number[keep]
    starts = np.flatnonzero(np.r_[True, day_kept[1:] != day_kept[:-1]]) if len(keep) else keep
    counts = np.diff(np.r_[starts, len(keep)])
    sparse = counts < min_observations
    if sparse.any():
        dates = pd.to_datetime(day_kept[starts] * _DAY_NS)
        rule = (f"a session needs at least {min_observations} rows for interval "
                f"{interval} (min_observations)")
        first = np.flatnonzero(sparse)[0]
        first_row = keep[starts[first]]
        if repair == "raise":
            raise SmleInputError(
                f"day {dates[first].date()} (session day {first}, starting at "
                f"{checks.row_name(positions[first_row], f'timestamp {intraday.index[first_row]}', source_name)}): "
                f"{counts[first]} rows inside the session {session_open}-{session_close}; rule "
                f"broken: {rule} ({int(sparse.sum())} such day(s) in all). Choose a longer "
                f"interval, lower min_observations, or pass repair='drop' to drop such days "
                f"(logged).")
        checker = checks.RowChecker(repair, source_name, "timestamp")
        checker.record(rule, "dropped day", positions[keep[starts[sparse]]],
                       [f"date {d.date()}" for d in dates[sparse]],
                       [f"{c} rows; the next day's overnight return starts from the last "
                        f"kept close" for c in counts[sparse]])
        repairs += checker.repairs
        keep = keep[np.repeat(~sparse, counts)]
        day_kept = day_number[keep]
        starts = np.flatnonzero(np.r_[True, day_kept[1:] != day_kept[:-1]]) if len(keep) \
            else keep
        counts = np.diff(np.r_[starts, len(keep)])
    n_days = len(starts)
    checks.check_length(n_days, max(int(min_days), 2), "session days", source_name)

    day = np.repeat(np.arange(n_days), counts)
    seconds = clock[keep] - open_seconds
    close = intraday["close" if bars else "price"].to_numpy()[keep]
    log_price = np.log(close)
    ends = np.r_[starts[1:], len(keep)] - 1
    first_price = close[starts]
    if bars and "open" in intraday:
        # A first bar that ends after the open started at the open: its open is the day's.
        first_open = intraday["open"].to_numpy()[keep][starts]
        first_price = np.where(seconds[starts] > 0.0, first_open, first_price)
    log_open = np.log(first_price)
    log_close = log_price[ends]

    values = {}
    returns = realized.grid_returns(day, seconds, log_price, log_open, length,
                                    interval_seconds, 0.0, scale)
    if "realized_variance" in measures:
        values["realized_variance"] = realized.realized_variance(returns)
    if "bipower_variation" in measures:
        values["bipower_variation"] = realized.bipower_variation(returns)
    if "subsampled_realized_variance" in measures:
        values["subsampled_realized_variance"] = realized.subsampled_realized_variance(
            day, seconds, log_price, log_open, length, interval_seconds, int(subsamples), scale)
    wanted_ranges = [name for name in measures if name in RANGE_MEASURES]
    if wanted_ranges:
        high_source = intraday["high"].to_numpy()[keep] if bars else close
        low_source = intraday["low"].to_numpy()[keep] if bars else close
        day_bars = {"open": first_price, "close": close[ends],
                    "high": np.maximum(np.maximum.reduceat(high_source, starts), first_price),
                    "low": np.minimum(np.minimum.reduceat(low_source, starts), first_price)}
        values.update(ranges.range_measures(day_bars, wanted_ranges, unit))

    dates = pd.DatetimeIndex(pd.to_datetime(day_kept[starts] * _DAY_NS), name="date")
    table = _assemble(dates, log_open, log_close, values, measures, add_overnight, unit)
    table["n_observations"] = counts[1:]
    table.attrs.update(units.describe_units(unit))
    table.attrs.update({
        "interval": str(interval), "subsamples": int(subsamples),
        "session": f"{session_open}-{session_close}", "timezone": str(timezone),
        "overnight_included": bool(add_overnight), "input_kind": intraday.attrs["kind"],
        "n_outside_session": n_outside, "source": source_name,
        "repairs": repairs})
    return table


def _assemble(dates, log_open, log_close, values, measures, add_overnight, unit):
    """The table from per-day log opens and closes and per-day measures; row 0 is dropped."""
    scale = units.scale(unit)
    overnight = scale * (log_open[1:] - log_close[:-1])
    table = pd.DataFrame(index=dates[1:])
    table[units.return_name("return", unit)] = scale * (log_close[1:] - log_close[:-1])
    table[units.return_name("overnight_return", unit)] = overnight
    table[units.return_name("session_return", unit)] = scale * (log_close[1:] - log_open[1:])
    for name in measures:
        if name not in values:
            continue
        series = np.asarray(values[name])[1:]
        if add_overnight:
            series = series + overnight ** 2
            name = f"{name}_whole_day"
        table[units.variance_name(name, unit)] = series
    return table


def prepare_from_daily(source, *, measures=RANGE_MEASURES, add_overnight: bool = False,
                       date_column: str | None = None, price_column: str | None = None,
                       columns: dict | None = None, unit: str = "percent",
                       repair: str = "raise", min_days: int = 2) -> pd.DataFrame:
    """Daily table from daily open-high-low-close bars, or from daily closes.

    Args:
      source: a CSV or Parquet path, or a DataFrame. When it has open, high, low and close
        columns (or ``columns`` maps them) it is read as bars, otherwise as closes.
      measures: range estimators to compute from bars (default all three).
      add_overnight: add the squared overnight return to each range estimator.
      date_column, price_column, columns: as in :func:`read_daily` / :func:`read_ohlc`.
      unit, repair, min_days: as in :func:`prepare_daily`.

    Returns:
      A DataFrame indexed by ``date``: ``return_pct``, and from bars also
      ``overnight_return_pct``, ``session_return_pct`` and the range estimators.
    """
    measures = tuple(name for name in _check_measures(measures) if name in RANGE_MEASURES)
    frame, _ = readers.load_table(source)
    lowered = {str(column).strip().lower() for column in frame.columns}
    is_bars = columns is not None or set(readers.BAR_FIELDS) <= lowered
    if is_bars and price_column is None:
        bars = readers.read_ohlc(source, date_column=date_column, columns=columns,
                                 repair=repair, min_rows=max(min_days, 2))
        values = ranges.range_measures(bars, measures, unit)
        table = _assemble(bars.index, np.log(bars["open"].to_numpy()),
                          np.log(bars["close"].to_numpy()), values, measures, add_overnight,
                          unit)
        kind = "daily bars"
    else:
        closes = readers.read_daily(source, date_column=date_column, price_column=price_column,
                                    repair=repair, min_rows=max(min_days, 2))
        bars = closes
        log_close = np.log(closes["close"].to_numpy())
        table = pd.DataFrame(
            {units.return_name("return", unit): units.scale(unit) * np.diff(log_close)},
            index=closes.index[1:])
        kind = "daily closes"
    table.attrs.update(units.describe_units(unit))
    table.attrs.update({"input_kind": kind, "overnight_included": bool(add_overnight),
                        "source": bars.attrs["source"], "repairs": bars.attrs["repairs"]})
    return table


def write_daily(table: pd.DataFrame, path, *, metadata: bool = True) -> Path:
    """Write a daily table as CSV (``date`` first), and its ``attrs`` beside it as JSON.

    Args:
      table: a table from :func:`prepare_daily` or :func:`prepare_from_daily`.
      path: the CSV file to write.
      metadata: also write ``<path>.meta.json`` with units, settings and repairs.

    Returns:
      The path of the CSV file.
    """
    path = Path(path)
    table.to_csv(path, index=True, index_label="date", date_format="%Y-%m-%d",
                 float_format="%.10g")
    if metadata:
        attrs = dict(table.attrs)
        attrs["repairs"] = [repair._asdict() for repair in attrs.get("repairs", [])]
        attrs["columns"] = list(table.columns)
        with open(_metadata_path(path), "w", encoding="utf-8") as handle:
            json.dump(attrs, handle, indent=2, default=str)
    return path


def read_daily_table(path) -> pd.DataFrame:
    """Read a table written by :func:`write_daily` (with its ``attrs`` when the JSON is there)."""
    path = Path(path)
    if not path.exists():
        raise SmleInputError(f"path={str(path)!r}: no such file")
    table = pd.read_csv(path, index_col="date", parse_dates=["date"])
    if isinstance(table.index, pd.DatetimeIndex):
        table.index = table.index.as_unit("ns")
    meta = _metadata_path(path)
    if meta.exists():
        with open(meta, encoding="utf-8") as handle:
            attrs = json.load(handle)
        attrs.pop("columns", None)
        attrs["repairs"] = [Repair(**repair) for repair in attrs.get("repairs", [])]
        table.attrs.update(attrs)
    return table


def _metadata_path(path: Path) -> Path:
    return path.with_name(path.name + ".meta.json")


def _looks_intraday(source, time_column) -> bool:
    """True when some calendar date has more than one row."""
    frame, _ = readers.load_table(source)
    key = readers._find_key(frame, time_column, "time_column")
    raw = frame[key]
    if pd.api.types.is_integer_dtype(raw):
        return False
    stamps = readers._parse_timestamps(raw)
    dates = stamps.tz_localize(None).normalize() if stamps.tz is not None else stamps.normalize()
    return bool(dates.dropna().has_duplicates)


def prepare_file(input_path, output_path=None, *, interval=DEFAULT_INTERVAL,
                 kind: str = "auto", **options) -> pd.DataFrame:
    """Read a price file, prepare the daily table and write it: the ``smle prepare`` job.

    Args:
      input_path: a CSV or Parquet file of intraday prices or bars, daily bars or closes.
      output_path: the CSV to write; by default ``<input stem>_daily.csv`` beside the input.
        Its attrs go to ``<output>.meta.json`` (see :func:`write_daily`).
      interval: sampling interval of the realized measures (intraday input only).
      kind: ``"intraday"``, ``"daily"`` or ``"auto"`` (default: intraday when some date has
        more than one row).
      **options: the keyword options of :func:`prepare_daily` (intraday) or
        :func:`prepare_from_daily` (daily).

    Returns:
      The table, with ``attrs["output_path"]`` set to the file written.
    """
    input_path = Path(input_path)
    if kind not in ("auto", "intraday", "daily"):
        raise SmleInputError(f"kind={kind!r} is not accepted; use 'auto', 'intraday' or 'daily'")
    if kind == "auto":
        frame, _ = readers.load_table(input_path)
        kind = "intraday" if _looks_intraday(
            frame, options.get("time_column") or options.get("date_column")) else "daily"
    if kind == "intraday":
        table = prepare_daily(input_path, interval, **options)
    else:
        table = prepare_from_daily(input_path, **options)
    if output_path is None:
        output_path = input_path.with_name(f"{input_path.stem}_daily.csv")
    written = write_daily(table, output_path)
    table.attrs["output_path"] = str(written)
    logger.info("wrote %d daily rows to %s", len(table), written)
    return table
