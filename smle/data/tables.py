"""Loading a table: a CSV or Parquet path (read by :mod:`smle.data.textfile` without
tracebacks) or a DataFrame, with the source's name for messages."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd

from smle.data import textfile
from smle.errors import SmleInputError, describe


def load_table(source) -> tuple[pd.DataFrame, str | None]:
    """A raw frame from a path or a frame, and the file name used in messages.

    A frame's non-default index becomes a column so that it can serve as the key. What was
    inferred while reading a file (encoding, separator, compression) is in
    ``frame.attrs["notes"]`` (see :mod:`smle.data.textfile`).
    """
    if isinstance(source, pd.DataFrame):
        frame = source
        if not isinstance(frame.index, pd.RangeIndex):
            frame = frame.reset_index()
        frame = frame.copy()
        frame.attrs = {"notes": list(source.attrs.get("notes", []))}
        offsets = source.attrs.get("utc_offset_ns")
        if offsets is not None and len(offsets) == len(frame):
            frame.attrs["utc_offset_ns"] = np.asarray(offsets)  # the clock as written
        return frame, None
    if isinstance(source, pd.Series):
        return load_table(source.to_frame())
    if not isinstance(source, (str, os.PathLike)):
        raise SmleInputError(
            f"source={describe(source)} is not accepted; pass a path to a CSV or Parquet file "
            f"or a pandas DataFrame")
    path = Path(source)
    if not path.exists():
        raise SmleInputError(f"source={str(path)!r}: no such file")
    notes: list[str] = []
    if path.suffix.lower() in (".parquet", ".pq"):
        frame = _read_parquet(path)
    else:
        frame, notes = textfile.read_csv_file(path)
    frame.attrs = {"notes": notes}
    return frame, path.name


def _read_parquet(path: Path) -> pd.DataFrame:
    try:
        import pyarrow  # noqa: F401  (only to give a clear message when it is missing)
    except ImportError as error:
        raise SmleInputError(
            f"source={str(path)!r} is a Parquet file, which needs the optional package "
            f"pyarrow (pip install pyarrow); CSV files need nothing extra") from error
    if path.is_dir():
        raise SmleInputError(f"source={str(path)!r} is a directory, not a file; accepted: "
                              f"{textfile.ACCEPTED}")
    try:
        frame = pd.read_parquet(path)
    except Exception as error:  # pyarrow raises several unrelated types for a damaged file
        raise SmleInputError(
            f"source={str(path)!r} could not be read as Parquet ({type(error).__name__}: "
            f"{' '.join(str(error).split())[:200]}); accepted: {textfile.ACCEPTED}") from None
    if not isinstance(frame.index, pd.RangeIndex):
        frame = frame.reset_index()
    return frame
