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
time zone, the rows outside the session (by reason), ``repairs``, ``n_zero_returns`` and
``notes``: sentences on what was inferred or found without being an error (the file's
encoding or separator, a reversed newest-first order, day-first dates, the inferred session,
rows left out, zero returns, which are kept as observations).
"""

from __future__ import annotations

import inspect
import logging
from pathlib import Path

import numpy as np
import pandas as pd

from smle.data import checks, daily_table, ranges, readers, realized, sessions, tables, timestamps, units
from smle.data.daily_table import read_daily_table, write_daily  # noqa: F401 (public here too)
from smle.data.checks import Repair
from smle.errors import SmleInputError, describe

logger = logging.getLogger("smle.data")

REALIZED_MEASURES = ("realized_variance", "bipower_variation", "subsampled_realized_variance")
RANGE_MEASURES = tuple(ranges.ESTIMATORS)
DEFAULT_MEASURES = REALIZED_MEASURES + RANGE_MEASURES

# None: the session is the data's own (the usual time of each day's first and last rows).
DEFAULT_SESSION_OPEN = None
DEFAULT_SESSION_CLOSE = None
DEFAULT_INTERVAL = "5min"


def _check_measures(measures) -> tuple[str, ...]:
    if isinstance(measures, str):
        measures = (measures,)  # one name, not its letters
    try:
        measures = tuple(measures)
    except TypeError:
        raise SmleInputError(
            f"measures={describe(measures)} is not accepted; give a name or a list of names "
            f"from {DEFAULT_MEASURES}") from None
    unknown = [name for name in measures if name not in DEFAULT_MEASURES]
    if unknown or not measures:
        raise SmleInputError(
            f"measures={measures!r} has unknown names {unknown}; accepted: a name or a list of "
            f"names from {DEFAULT_MEASURES}" if unknown else
            f"measures={measures!r} is empty; accepted: names from {DEFAULT_MEASURES}")
    return measures


def _note_zero_returns(table: pd.DataFrame, unit: str, notes: list[str]) -> None:
    """Count close-to-close returns that are exactly zero (a holiday carried as an unchanged
    close, or a stale price); they stay in the table as observations."""
    returns = table[units.return_name("return", unit)].to_numpy()
    zero = np.flatnonzero(returns == 0.0)
    table.attrs["n_zero_returns"] = int(len(zero))
    if len(zero):
        shown = ", ".join(str(getattr(day, "date", lambda: day)()) for day in table.index[zero[:5]])
        notes.append(
            f"{len(zero)} of {len(returns)} daily returns are exactly zero ({shown}"
            f"{', ...' if len(zero) > 5 else ''}): an unchanged close, as when a holiday is "
            f"carried as a day without trading; they are kept as observations (a zero return "
            f"says the day had no variation, which lowers the estimated volatility); drop "
            f"those rows from the input if they are not trading days")


def prepare_daily(source, interval=DEFAULT_INTERVAL, *, measures=DEFAULT_MEASURES,
                  subsamples: int = 5, add_overnight: bool = False,
                  session_open: str | None = DEFAULT_SESSION_OPEN,
                  session_close: str | None = DEFAULT_SESSION_CLOSE,
                  timezone: str | None = readers.DEFAULT_TIMEZONE, source_timezone: str | None = None,
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
        ``timezone``. By default (None) the data's own session: the most common minute of a
        day's first row (for bars, less the usual bar length, since a bar is stamped at its
        end) and of its last row; what was inferred is in ``attrs["notes"]``. Rows outside
        the session are left out, counted by reason in ``attrs["outside_session"]``
        (``before_open``, ``after_close``; the total in ``attrs["n_outside_session"]``),
        noted and logged. Sessions over midnight are not supported.
      timezone: the venue's time zone; by default (None) the clock as written in the data
        (see :func:`smle.data.read_intraday`).
      source_timezone, time_column, columns, bar_timestamp, bar_length: passed to
        :func:`smle.data.read_intraday`.
      price_column: the column of prices when it is not found by name (for bars, reads
        that one column as prices instead).
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
    subsamples = checks.positive_integer(subsamples, "subsamples")
    if min_observations is not None:
        min_observations = checks.positive_integer(min_observations, "min_observations")
    min_days = checks.positive_integer(min_days, "min_days")
    add_overnight = checks.flag(add_overnight, "add_overnight")
    given_open = None if session_open is None else sessions.clock_seconds(session_open, "session_open")
    given_close = None if session_close is None else sessions.clock_seconds(session_close,
                                                                     "session_close")
    sessions.interval_seconds(interval, sessions.DAY_NS / 1e9)

    earlier = list(source.attrs.get("repairs", [])) if isinstance(source, pd.DataFrame) else []
    intraday = readers.read_intraday(
        source, time_column=time_column, price_column=price_column, columns=columns,
        timezone=timezone, source_timezone=source_timezone, bar_timestamp=bar_timestamp,
        bar_length=bar_length, repair=repair)
    source_name = intraday.attrs["source"]
    repairs: list[Repair] = earlier + list(intraday.attrs["repairs"])
    notes: list[str] = list(intraday.attrs.get("notes", []))
    positions = intraday.attrs["positions"]
    bars = intraday.attrs["kind"] == "bars"

    # Venue wall-clock time: whole days and seconds after midnight, straight from int64.
    if "utc_offset_ns" in intraday.attrs:
        wall = intraday.index.as_unit("ns").asi8 + intraday.attrs["utc_offset_ns"]
    else:
        wall = intraday.index.tz_localize(None).as_unit("ns").asi8
    day_number = wall // sessions.DAY_NS
    clock = (wall - day_number * sessions.DAY_NS) / 1e9
    sessions.refuse_daily(day_number, clock, source_name)
    inferred_open, inferred_close = sessions.usual_session(day_number, clock, bars)
    open_seconds = inferred_open if given_open is None else given_open
    close_seconds = inferred_close if given_close is None else given_close
    session_open = sessions.clock_text(open_seconds) if session_open is None else session_open
    session_close = sessions.clock_text(close_seconds) if session_close is None else session_close
    if close_seconds <= open_seconds:
        raise SmleInputError(
            f"session_close={session_close!r} must be later than session_open="
            f"{session_open!r} on the same day (sessions over midnight are not supported); "
            f"the data's usual session is {sessions.clock_text(inferred_open)}-"
            f"{sessions.clock_text(inferred_close)}")
    if given_open is None or given_close is None:
        notes.append(f"session {session_open}-{session_close} (clock: "
                     f"{intraday.attrs['timezone']}) inferred from the data, from the usual time "
                     f"of each day's first and last rows; set {checks.suggest('session_open', repr(session_open), session_open)} and "
                     f"{checks.suggest('session_close', repr(session_close), session_close)} "
                     f"to choose another")
    length = close_seconds - open_seconds
    interval_seconds = sessions.interval_seconds(interval, length)
    n_intervals = int(np.ceil(length / interval_seconds - 1e-9))
    if min_observations is None:
        min_observations = n_intervals
    zone_text = intraday.attrs["timezone"]
    before = clock < open_seconds
    after = clock > close_seconds
    inside = ~(before | after)
    outside = {"before_open": int(np.count_nonzero(before)),
               "after_close": int(np.count_nonzero(after))}
    n_outside = outside["before_open"] + outside["after_close"]
    if n_outside:
        text = (f"{n_outside} of {len(inside)} intraday rows ({100 * n_outside / len(inside):.1f}%)"
                f" fall outside the session {session_open}-{session_close} (clock: {zone_text}) "
                f"and are left out: {outside['before_open']} before the open, "
                f"{outside['after_close']} after the close")
        logger.warning("%s", text)
        notes.append(text)
    keep = np.flatnonzero(inside)

    # Too-sparse days: count rows per day (data are sorted, so days are contiguous runs).
    day_kept = day_number[keep]
    starts = np.flatnonzero(np.r_[True, day_kept[1:] != day_kept[:-1]]) if len(keep) else keep
    counts = np.diff(np.r_[starts, len(keep)])
    sparse = counts < min_observations
    if sparse.any():
        dates = pd.to_datetime(day_kept[starts] * sessions.DAY_NS)
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
                f"interval, lower min_observations, or pass {checks.DROP_HINT} to drop such "
                f"days (logged).")
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

    dates = pd.DatetimeIndex(pd.to_datetime(day_kept[starts] * sessions.DAY_NS), name="date")
    table = _assemble(dates, log_open, log_close, values, measures, add_overnight, unit)
    table["n_observations"] = counts[1:]
    table.attrs.update(units.describe_units(unit))
    table.attrs.update({
        "interval": str(interval), "subsamples": int(subsamples),
        "session": f"{session_open}-{session_close}", "timezone": zone_text,
        "overnight_included": bool(add_overnight), "input_kind": intraday.attrs["kind"],
        "n_outside_session": n_outside, "outside_session": outside, "source": source_name,
        "repairs": repairs})
    _note_zero_returns(table, unit, notes)
    table.attrs["notes"] = notes
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
    asked = _check_measures(measures)
    realized_asked = [name for name in asked if name not in RANGE_MEASURES]
    if realized_asked:
        raise SmleInputError(
            f"measures={asked!r}: {realized_asked} need intraday prices (several a day); from "
            f"daily data the accepted measures are {RANGE_MEASURES}")
    measures = asked
    min_days = checks.positive_integer(min_days, "min_days")
    add_overnight = checks.flag(add_overnight, "add_overnight")
    frame, _ = tables.load_table(source)
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
        if "close" not in closes.columns:
            where = f" {closes.attrs['source']}" if closes.attrs["source"] else ""
            raise SmleInputError(
                f"source{where} has no price column, only returns (columns "
                f"{list(frame.columns)}); preparation turns prices into returns and measures. "
                f"Returns can be fitted directly (command line: smle fit FILE --column NAME), "
                f"or read with read_daily(source, return_column=...); if a column does hold "
                f"prices, name it with {checks.suggest('price_column', repr('NAME'), 'NAME')}")
        bars = closes
        log_close = np.log(closes["close"].to_numpy())
        table = pd.DataFrame(
            {units.return_name("return", unit): units.scale(unit) * np.diff(log_close)},
            index=closes.index[1:])
        kind = "daily closes"
    table.attrs.update(units.describe_units(unit))
    table.attrs.update({"input_kind": kind, "overnight_included": bool(add_overnight),
                        "source": bars.attrs["source"], "repairs": bars.attrs["repairs"]})
    notes = list(bars.attrs.get("notes", []))
    _note_zero_returns(table, unit, notes)
    table.attrs["notes"] = notes
    return table


def _looks_intraday(source, time_column) -> bool:
    """True when some calendar date has more than one row."""
    frame, _ = tables.load_table(source)
    key = readers._find_key(frame, time_column, "time_column")
    raw = frame[key]
    if pd.api.types.is_integer_dtype(raw):
        return False
    dates = pd.DatetimeIndex(timestamps.wall_clock(raw)).normalize()
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
        frame, _ = tables.load_table(input_path)
        kind = "intraday" if _looks_intraday(
            frame, options.get("time_column") or options.get("date_column")) else "daily"
    target = prepare_daily if kind == "intraday" else prepare_from_daily
    accepted = [name for name, parameter in inspect.signature(target).parameters.items()
                if parameter.kind is inspect.Parameter.KEYWORD_ONLY]
    unknown = sorted(set(options) - set(accepted))
    if unknown:
        raise SmleInputError(
            f"{', '.join(f'{name}={describe(options[name])}' for name in unknown)}: not an "
            f"option of {target.__name__} ({kind} input); accepted: {accepted}")
    if output_path is not None:
        output_path = daily_table.writable(output_path, "output_path")
    if kind == "intraday":
        table = prepare_daily(input_path, interval, **options)
    else:
        table = prepare_from_daily(input_path, **options)
    if output_path is None:
        output_path = input_path.with_name(f"{input_path.stem}_daily.csv")
    written = daily_table.write_daily(table, output_path)
    table.attrs["output_path"] = str(written)
    logger.info("wrote %d daily rows to %s", len(table), written)
    return table
