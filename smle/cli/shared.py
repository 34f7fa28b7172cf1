"""What the commands share: reading a column of a CSV file as returns, reading a saved fit, and
the column options. Every command module imports from here (never from another command module).
"""

from __future__ import annotations

import sys

import numpy as np

from smle.errors import SmleInputError


def read_series(path: str, column: str | None, prices: bool, drop_missing: bool) -> tuple[np.ndarray, object, str]:
    """One numeric column of a CSV file as returns (percent log returns when ``prices``)."""
    import pandas as pd

    try:
        frame = pd.read_csv(path)
    except FileNotFoundError:
        raise SmleInputError(f"data file {path!r} does not exist") from None
    except (pd.errors.ParserError, UnicodeDecodeError, pd.errors.EmptyDataError) as error:
        raise SmleInputError(f"data file {path!r} could not be read as CSV: {error}") from None
    if column is None:
        numeric = [c for c in frame.columns if pd.api.types.is_numeric_dtype(frame[c]) and str(c).lower() not in ("rownames", "index", "")]
        if not numeric:
            raise SmleInputError(f"{path!r} has no numeric column; its columns are: {', '.join(map(str, frame.columns))}")
        column = numeric[-1]
    elif column not in frame.columns:
        raise SmleInputError(f"--column {column!r} is not in {path!r}; its columns are: {', '.join(map(str, frame.columns))}")
    series = pd.to_numeric(frame[column], errors="coerce")
    bad_text = series.isna() & frame[column].notna()
    if bad_text.any():
        rows = [int(r) + 2 for r in np.flatnonzero(bad_text.to_numpy())[:5]]
        raise SmleInputError(f"column {column!r} of {path!r} has non-numeric values at file line(s) {rows}")
    missing = series.isna().to_numpy()
    if missing.any():
        rows = [int(r) + 2 for r in np.flatnonzero(missing)[:10]]
        if not drop_missing:
            raise SmleInputError(
                f"column {column!r} of {path!r} has {int(missing.sum())} missing value(s), at file line(s) {rows}"
                f"{' ...' if missing.sum() > 10 else ''}; fix them, or pass --drop-missing to drop those rows"
            )
        print(f"dropped {int(missing.sum())} row(s) with a missing {column!r} (file lines {rows}...)", file=sys.stderr)
        frame = frame.loc[~missing]
        series = series.loc[~missing]
    values = series.to_numpy(dtype=float)
    index = frame.iloc[:, 0].to_numpy() if frame.shape[1] > 1 else np.arange(len(values))
    unit = "as given"
    if prices:
        if np.any(values <= 0):
            row = int(np.flatnonzero(values <= 0)[0]) + 2
            raise SmleInputError(f"--prices: column {column!r} has a non-positive price at file line {row}")
        values = 100.0 * np.diff(np.log(values))
        index = index[1:]
        unit = "percent log returns"
    return values, index, f"{column} ({unit})"


def read_saved_fit(path: str, argument: str):
    """A :class:`~smle.FitResult` from its JSON file, or an error naming ``argument`` and the file."""
    import smle

    try:
        return smle.FitResult.from_json(path)
    except FileNotFoundError:
        raise SmleInputError(f"{argument} {path!r} does not exist") from None
    except (ValueError, KeyError, TypeError) as error:
        raise SmleInputError(f"{argument} {path!r} is not a fit saved by 'smle fit --report' ({error})") from None


def add_column_options(parser, which: str = "") -> None:
    """``--column``, ``--prices`` and ``--drop-missing``: how a CSV column becomes returns (see read_series)."""
    parser.add_argument("--column", help=f"column {which}to use (default: the last numeric column)")
    parser.add_argument("--prices", action="store_true",
                        help=f"the column {which}holds prices: convert to percent log returns")
    parser.add_argument("--drop-missing", action="store_true",
                        help=f"drop rows {which}with a missing value instead of failing")


def _scalar(text: str):
    """A model option's value from text: true/false, an integer, a number, else the text."""
    lowered = text.strip().lower()
    if lowered in ("true", "false"):
        return lowered == "true"
    for kind in (int, float):
        try:
            return kind(text)
        except ValueError:
            pass
    return text.strip()


def _pairs(text: str, what: str, example: str) -> list[tuple[str, str]]:
    pairs = []
    for item in filter(None, (part.strip() for part in text.split(","))):
        name, sep, value = item.partition("=")
        if not sep or not name.strip() or not value.strip():
            raise SmleInputError(f"{what} item {item!r} is not accepted; accepted: name=value, e.g. {example}")
        pairs.append((name.strip(), value.strip()))
    return pairs


def parse_fixed(items) -> dict[str, float]:
    """``--fix NAME=VALUE`` items (repeatable; each may hold several, comma-separated) as a mapping."""
    fixed = {}
    for text in items or []:
        for name, value in _pairs(text, "--fix", "--fix ar1=0"):
            try:
                fixed[name] = float(value)
            except ValueError:
                raise SmleInputError(f"--fix {name}={value!r}: the value is not a number; accepted: e.g. "
                                     "--fix ar1=0") from None
    return fixed


def parse_model_spec(text: str, fixed=None):
    """``NAME[:key=value,...]`` as ``(model, fixed)``: keys naming a parameter of the model hold it
    at the value (as ``--fix``), the other keys are model options (e.g. ``garch:innovations=t,ar1=0``).
    ``fixed`` (from ``--fix``) adds the values of the model's parameters among its names."""
    import smle

    name, _, rest = text.partition(":")
    pairs = _pairs(rest, f"--model {text!r}", "garch:innovations=t,ar1=0")
    bare = smle.get_model(name.strip())
    params = set(bare.param_names)
    options = {k: _scalar(v) for k, v in pairs if k not in params}
    model = smle.get_model(name.strip(), **options)
    held = {k: v for k, v in (fixed or {}).items() if k in model.param_names}
    for k, v in pairs:
        if k in params:
            try:
                held[k] = float(v)
            except ValueError:
                raise SmleInputError(f"--model {text!r}: {k}={v!r} is not a number (a parameter is held at a "
                                     "number)") from None
    return model, held


def add_fix_option(parser) -> None:
    """``--fix NAME=VALUE`` (repeatable): parameters held at given values during the fit."""
    parser.add_argument("--fix", action="append", default=[], metavar="NAME=VALUE",
                        help="hold a parameter at a value while the others are estimated, e.g. --fix ar1=0 "
                             "(repeatable; a name the model does not have is an error for fit, skipped by compare)")
