"""Storing the aligned daily table: :func:`write_daily` writes it (CSV or Parquet, with its
``attrs`` in a JSON file beside it) and :func:`read_daily_table` reads it back, checked."""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pandas as pd

from smle.data import checks, readers, tables, timestamps
from smle.data.checks import Repair
from smle.errors import SmleInputError, describe


def write_daily(table: pd.DataFrame, path, *, metadata: bool = True) -> Path:
    """Write a daily table as CSV (``date`` first), and its ``attrs`` beside it as JSON.

    Args:
      table: a table from :func:`prepare_daily` or :func:`prepare_from_daily`.
      path: the CSV file to write.
      metadata: also write ``<path>.meta.json`` with units, settings and repairs.

    Returns:
      The path of the CSV file.
    """
    path = writable(path, "path")
    table.to_csv(path, index=True, index_label="date", date_format="%Y-%m-%d",
                 float_format="%.10g")
    if metadata:
        attrs = dict(table.attrs)
        attrs["repairs"] = [repair._asdict() for repair in attrs.get("repairs", [])]
        attrs["columns"] = list(table.columns)
        with open(_metadata_path(path), "w", encoding="utf-8") as handle:
            json.dump(attrs, handle, indent=2, default=str)
    return path


def writable(path, argument: str) -> Path:
    """A path a CSV can be written to, or a clear error."""
    if not isinstance(path, (str, os.PathLike)):
        raise SmleInputError(f"{argument}={describe(path)} is not accepted; give a file path")
    path = Path(path)
    if path.is_dir():
        raise SmleInputError(f"{argument}={str(path)!r} is a directory; give a file path such "
                             f"as {str(path / 'daily.csv')!r}")
    if path.parent.exists() and not path.parent.is_dir():
        raise SmleInputError(f"{argument}={str(path)!r}: {str(path.parent)!r} is a file, not a folder; give a "
                             "path in an existing folder")
    if not path.parent.is_dir():
        raise SmleInputError(f"{argument}={str(path)!r}: the folder {str(path.parent)!r} does "
                             f"not exist; create it first")
    return path


def read_daily_table(path) -> pd.DataFrame:
    """Read a table written by :func:`write_daily` (with its ``attrs`` when the JSON is there).

    The file must have a ``date`` column of readable dates, oldest first without repeats, and
    numbers in every other column; anything else is an error naming the row.
    """
    path = Path(path)
    if not path.exists():
        raise SmleInputError(f"path={str(path)!r}: no such file")
    frame, name = tables.load_table(path)
    if "date" not in frame.columns:
        raise SmleInputError(
            f"path={str(path)!r} has no 'date' column (columns {list(frame.columns)}); "
            f"accepted: a daily table written by write_daily or smle prepare")
    checker = checks.RowChecker("raise", name, "date")
    frame = frame.copy()
    frame[checks.POSITION] = np.arange(len(frame))
    raw = frame.pop("date")
    keys = pd.DatetimeIndex(timestamps.wall_clock(raw), name="date").as_unit("ns")
    frame = frame.set_axis(keys)
    frame, keys = checks.check_missing_key(frame, keys, checker, raw.set_axis(keys))
    data_columns = [column for column in frame.columns if column != checks.POSITION]
    frame = readers._as_numbers(frame, data_columns, checker)
    frame = checks.check_order(frame, checker)
    table = frame[data_columns]
    meta = _metadata_path(path)
    if meta.exists():
        try:
            with open(meta, encoding="utf-8") as handle:
                attrs = json.load(handle)
            attrs.pop("columns", None)
            attrs["repairs"] = [Repair(**repair) for repair in attrs.get("repairs", [])]
        except (OSError, ValueError, TypeError, AttributeError) as error:
            raise SmleInputError(
                f"{meta.name} beside path={str(path)!r} is not the JSON that write_daily "
                f"writes ({type(error).__name__}: {error}); delete it or write the table "
                f"again") from None
        table.attrs.update(attrs)
    return table


def _metadata_path(path: Path) -> Path:
    return path.with_name(path.name + ".meta.json")
