"""The observations of a command from a file: which columns, in which order of time, in which unit.

A file with a date (or time) column is read by :func:`smle.data.read_daily`, one column at a
time: its rows are checked, a newest-first file is reversed, and what the reader noticed is
printed (``attrs["notes"]``). A file without one is read in its own row order. Columns are the
``--column`` ones (one per observed series, in the model's order), else chosen here: the return
and realized-measure columns of a table written by ``smle prepare``, else the numeric columns
when there are as many as the model has series. Anything else stops with the numeric columns
listed. :class:`Observations` carries what was used, for the result's ``data_source``.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import NamedTuple

from smle.errors import SmleInputError

_INDEX_NAMES = ("rownames", "index", "", "unnamed: 0", "unnamed:_0")
_RETURN_COLUMNS = ("return_pct", "return_dec")
# the realized measures a prepared daily table can hold, best first (see smle.data.prepare)
_MEASURE_STEMS = ("realized_variance", "subsampled_realized_variance", "bipower_variation",
                  "garman_klass", "rogers_satchell", "parkinson")
_UNITS = {"_pct": "percent log return", "_pct2": "percent squared", "_dec": "log return",
          "_dec2": "log return squared"}


class Observations(NamedTuple):
    """Observations read for a command.

    Attributes:
      values: shape (T,) for one series, (T, n) for several.
      dates: the dates (ISO text) of the rows, or None when the file has none.
      label: the first series and its unit, for figure axes.
      source: what was read (file, columns, units, prices), as stored in ``FitResult.data_source``.
    """

    values: object
    dates: list | None
    label: str
    source: dict


def say(text: str) -> None:
    """A line for the user on standard error (what the data readers noticed, what was chosen)."""
    print(text, file=sys.stderr, flush=True)


def unit_of(column: str) -> str | None:
    """The unit a column name states (``return_pct``: percent log return), or None."""
    for suffix in sorted(_UNITS, key=len, reverse=True):
        if str(column).endswith(suffix):
            return _UNITS[suffix]
    return None


def _date_key(frame):
    from smle.data import readers

    try:
        return readers._find_key(frame, None, "date_column")
    except SmleInputError:
        return None


def _numeric_columns(frame, key) -> list[str]:
    import pandas as pd

    return [c for c in frame.columns if c != key and pd.api.types.is_numeric_dtype(frame[c])
            and str(c).strip().lower() not in _INDEX_NAMES]


def _numbers_with_text(frame, key) -> list[str]:
    """Text columns that are numbers but for a few cells (more than half of the filled cells read as
    numbers): read as the data, so that the readers name each bad cell and its line."""
    import pandas as pd

    found = []
    for c in frame.columns:
        if c == key or pd.api.types.is_numeric_dtype(frame[c]) or str(c).strip().lower() in _INDEX_NAMES:
            continue
        filled = frame[c].dropna()
        if len(filled) and pd.to_numeric(filled, errors="coerce").notna().mean() > 0.5:
            found.append(c)
    return found


def _prepared_columns(frame, n_series: int) -> list[str] | None:
    """The return (and realized-measure) columns of a table written by ``smle prepare``, or None."""
    returns = [c for c in _RETURN_COLUMNS if c in frame.columns]
    if not returns:
        return None
    chosen = [returns[0]]
    if n_series > 1:
        suffix = returns[0].rsplit("_", 1)[1] + "2"
        measures = [f"{stem}{part}_{suffix}" for stem in _MEASURE_STEMS for part in ("", "_whole_day")]
        present = [m for m in measures if m in frame.columns]
        if not present:
            return None
        chosen.append(present[0])
    return chosen


def choose_columns(frame, key, columns, n_series: int, labels, model_name: str, path) -> list[str]:
    """The columns to read, one per observed series, or an error listing the numeric columns."""
    wanted = ", ".join(labels[:n_series])
    if columns:
        missing = [c for c in columns if c not in frame.columns]
        if missing:
            raise SmleInputError(f"--column {missing[0]!r} is not in {str(path)!r}; its columns are: "
                                 f"{', '.join(map(str, frame.columns))}")
        if len(columns) != n_series:
            raise SmleInputError(f"model '{model_name}' takes {n_series} series ({wanted}): give --column "
                                 f"{n_series} time(s), in that order; got {len(columns)} ({', '.join(columns)})")
        return list(columns)
    prepared = _prepared_columns(frame, n_series)
    if prepared is not None:
        say(f"using column(s) {', '.join(prepared)} of the prepared table {Path(path).name} "
            f"as {wanted} (choose others with --column)")
        return prepared
    numeric = _numeric_columns(frame, key) or _numbers_with_text(frame, key)
    if len(numeric) == n_series:
        return numeric
    if not numeric:
        raise SmleInputError(f"{str(path)!r} has no numeric column; its columns are: "
                             f"{', '.join(map(str, frame.columns))}")
    raise SmleInputError(
        f"{str(path)!r} has {len(numeric)} numeric columns ({', '.join(map(str, numeric))}) and model "
        f"'{model_name}' takes {n_series} series ({wanted}): choose with --column NAME"
        + (" (once per series, in that order)" if n_series > 1 else ""))


def _plain_columns(frame, chosen, drop_missing: bool, path):
    """The chosen columns of a file without dates, in its row order, as an array (T, k)."""
    import numpy as np
    import pandas as pd

    block = frame[chosen].apply(pd.to_numeric, errors="coerce")
    for column in chosen:
        bad_text = block[column].isna() & frame[column].notna()
        if bad_text.any():
            rows = [int(r) + 2 for r in np.flatnonzero(bad_text.to_numpy())[:5]]
            first = frame[column][bad_text].iloc[0]
            raise SmleInputError(f"column {column!r} of {str(path)!r} has {int(bad_text.sum())} non-numeric value(s), "
                                 f"the first {str(first)!r}, at file line(s) {rows}; accepted: numbers only (fix "
                                 "or delete those cells)")
    missing = block.isna().any(axis=1).to_numpy()
    if missing.any():
        rows = [int(r) + 2 for r in np.flatnonzero(missing)[:10]]
        if not drop_missing:
            raise SmleInputError(
                f"{', '.join(chosen)} of {str(path)!r} has {int(missing.sum())} missing value(s), at file "
                f"line(s) {rows}{' ...' if missing.sum() > 10 else ''}; fix them, or pass --drop-missing "
                "to drop those rows")
        say(f"dropped {int(missing.sum())} row(s) with a missing value (file lines {rows}...)")
        block = block.loc[~missing]
    return block.to_numpy(dtype=float)


def _dated_columns(path, key, chosen, prices: bool, drop_missing: bool):
    """The chosen columns read by :func:`smle.data.read_daily`, in time order; (values, index)."""
    import pandas as pd

    from smle.data import read_daily

    repair = "drop" if drop_missing else "raise"
    parts, notes = [], None
    for position, column in enumerate(chosen):
        if prices and position == 0:
            part = read_daily(path, date_column=key, price_column=column, repair=repair)["close"]
        else:
            part = read_daily(path, date_column=key, return_column=column, repair=repair)["return_pct"]
        notes = part.attrs.get("notes", []) if notes is None else notes
        for repair_made in part.attrs.get("repairs", []):
            say(f"{repair_made.action} {repair_made.label}: {repair_made.rule} ({repair_made.detail})")
        part = part.rename(column)
        part.attrs = {}  # the readers' attrs hold arrays, which pandas cannot compare when joining
        parts.append(part)
    for note in notes:
        say(f"note: {note}")
    table = pd.concat(parts, axis=1, join="inner")
    return table.to_numpy(dtype=float), table.index


def read_observations(path, columns, prices: bool, drop_missing: bool, model=None) -> Observations:
    """The observations of ``model`` (default: one series) from a CSV or Parquet file."""
    import numpy as np

    from smle.data import readers
    from smle.results import date_texts

    if not Path(path).exists():
        raise SmleInputError(f"data file {str(path)!r} does not exist")
    n_series = getattr(model, "n_series", 1)
    labels = getattr(model, "series_labels", ("return",))
    name = getattr(model, "name", "the model")
    frame, _ = readers.load_table(path)
    key = _date_key(frame)
    chosen = choose_columns(frame, key, columns, n_series, labels, name, path)
    if key is None:
        for note in frame.attrs.get("notes", []):
            say(f"note: {note}")
        values, index = _plain_columns(frame, chosen, drop_missing, path), None
    else:
        values, index = _dated_columns(path, key, chosen, prices, drop_missing)
    units = [unit_of(c) for c in chosen]
    if prices:
        if np.any(values[:, 0] <= 0):
            row = int(np.flatnonzero(values[:, 0] <= 0)[0]) + 2
            raise SmleInputError(f"--prices: column {chosen[0]!r} has a non-positive price at file line {row}")
        returns = 100.0 * np.diff(np.log(values[:, 0]))
        values = np.column_stack([returns, values[1:, 1:]])
        index = None if index is None else index[1:]
        units[0] = "percent log return, from prices"
    dates = None if index is None else date_texts(index)
    source = {"file": str(path), "columns": list(chosen), "units": units, "prices": bool(prices)}
    label = f"{chosen[0]} ({units[0] or 'as given'})"
    return Observations(values[:, 0] if n_series == 1 else values, dates, label, source)
