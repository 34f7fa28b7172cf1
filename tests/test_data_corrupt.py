"""Damaged and unusual files: every outcome is a clear SmleInputError or a correct parse.

The rule is smle's own (design notes: bad input gets a clear error naming the argument, the
value and what is accepted; never a traceback from inside pandas or NumPy, never a silent
wrong number). The files are the invented demo scenario's (DEMO DATA ONLY, not real data),
corrupted by a seeded generator: random bytes, deleted cells, Latin-1 and UTF-16 encodings,
a byte-order mark, semicolons (and decimal commas), a missing header, long lines, truncation,
repeated and swapped lines, gzip. "Correct" means: the rows that come back are rows of the
clean file with the clean file's values (a damaged row may be refused, never altered).
"""

import gzip

import numpy as np
import pandas as pd
import pytest

from smle.data import (demo_scenario, prepare_file, read_daily, read_daily_table,
                       read_intraday, read_ohlc)
from smle.errors import SmleInputError

N_VARIANTS = 40  # per file kind: 80 files, a few seconds in all


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    folder = tmp_path_factory.mktemp("clean")
    scenario = demo_scenario(seed=11, n_days=3, folder=folder)
    return {"intraday": scenario.files["intraday"].read_bytes(),
            "daily": scenario.files["daily"].read_bytes()}


def _lines(data: bytes) -> list[bytes]:
    return data.split(b"\n")


def _corrupt(data: bytes, rng: np.random.Generator) -> tuple[str, bytes]:
    """One seeded corruption of a CSV file's bytes: (name, bytes)."""
    kind = rng.integers(14)
    lines = _lines(data)
    body = range(1, len(lines) - 1)  # data lines (the last element is the empty tail)
    if kind == 0:  # random bytes that cannot form digits or dates
        out = bytearray(data)
        alphabet = np.r_[np.arange(0x80, 0x100), [0, ord(","), ord(";"), ord('"'), ord("x")]]
        for position in rng.integers(0, len(out), rng.integers(1, 6)):
            out[position] = int(rng.choice(alphabet))
        return "random bytes", bytes(out)
    if kind == 1:  # a deleted cell, with or without its comma
        i = int(rng.choice(body))
        cells = lines[i].split(b",")
        j = int(rng.integers(len(cells)))
        if rng.random() < 0.5:
            cells[j] = b""
        else:
            del cells[j]
        lines[i] = b",".join(cells)
        return "deleted cell", b"\n".join(lines)
    if kind == 2:  # Latin-1, with an accented extra column
        text = data.decode("utf-8").split("\n")
        text[0] += ",remarqu\u00e9"
        text[1:-1] = [line + ",\u00e9t\u00e9" for line in text[1:-1]]
        return "latin-1", "\n".join(text).encode("latin-1")
    if kind == 3:
        return "utf-16", data.decode("utf-8").encode("utf-16")
    if kind == 4:
        return "utf-16-le without BOM", data.decode("utf-8").encode("utf-16-le")
    if kind == 5:
        return "UTF-8 BOM", b"\xef\xbb\xbf" + data
    if kind == 6:
        return "semicolons", data.replace(b",", b";")
    if kind == 7:  # semicolons and decimal commas, as in many European exports
        return "semicolons, decimal commas", data.replace(b",", b";").replace(b".", b",")
    if kind == 8:
        return "missing header", b"\n".join(lines[1:])
    if kind == 9:  # a very long line
        i = int(rng.choice(body))
        lines[i] = lines[i] + rng.choice([b",", b"x"]) * int(rng.integers(10_000, 100_000))
        return "long line", b"\n".join(lines)
    if kind == 10:
        return "truncated", data[: int(rng.integers(1, len(data)))]
    if kind == 11:  # a repeated line
        i = int(rng.choice(body))
        lines.insert(i, lines[i])
        return "repeated line", b"\n".join(lines)
    if kind == 12:  # two lines swapped
        i = int(rng.choice(body[:-1]))
        lines[i], lines[i + 1] = lines[i + 1], lines[i]
        return "swapped lines", b"\n".join(lines)
    return "gzip", gzip.compress(data, mtime=0)


def _same_rows(result: pd.DataFrame, reference: pd.DataFrame, what: str) -> None:
    """Every returned row is a row of the clean file, with its values."""
    assert result.index.isin(reference.index).all(), what
    expected = reference.loc[result.index, result.columns]
    np.testing.assert_allclose(result.to_numpy(), expected.to_numpy(), rtol=1e-12,
                               err_msg=what)


def _outcome(function, path, **options):
    try:
        return function(path, **options)
    except SmleInputError as error:
        message = str(error)
        assert message and len(message) < 3000, message
        return None


@pytest.mark.parametrize("file_kind", ["intraday", "daily"])
def test_corrupted_files_give_clear_errors_or_correct_results(clean, file_kind, tmp_path):
    rng = np.random.default_rng(2031 if file_kind == "intraday" else 2032)
    reader = read_intraday if file_kind == "intraday" else read_ohlc
    reference_path = tmp_path / "clean.csv"
    reference_path.write_bytes(clean[file_kind])
    reference = reader(reference_path)
    reference_table = prepare_file(reference_path, tmp_path / "clean_daily.csv")
    outcomes = {"parsed": 0, "refused": 0}
    for variant in range(N_VARIANTS):
        name, data = _corrupt(clean[file_kind], rng)
        path = tmp_path / f"variant_{variant}.csv"
        path.write_bytes(data)
        what = f"variant {variant} ({name})"
        result = _outcome(reader, path)
        if result is not None:
            _same_rows(result, reference, what)
        outcomes["parsed" if result is not None else "refused"] += 1
        table = _outcome(prepare_file, path, output_path=tmp_path / f"out_{variant}.csv")
        if table is not None:
            assert not table.isna().any().any(), what
            common = table.index.intersection(reference_table.index)
            assert len(common) == len(table), what
            if "n_observations" in table:
                # A day that lost rows has other measures; days that kept them must agree.
                common = common[table.loc[common, "n_observations"]
                                == reference_table.loc[common, "n_observations"]]
            _same_rows(table.loc[common], reference_table, what)
    # Both outcomes occur: legitimate variants (encodings, BOM, separators, gzip) parse.
    assert outcomes["parsed"] > 5 and outcomes["refused"] > 5, outcomes


@pytest.mark.parametrize("variant", ["utf-8-sig", "utf-16", "latin-1", "semicolons",
                                     "decimal commas", "gzip"])
def test_legitimate_variants_parse_exactly_with_a_note(clean, variant, tmp_path):
    reference_path = tmp_path / "clean.csv"
    reference_path.write_bytes(clean["daily"])
    reference = read_ohlc(reference_path)
    text = clean["daily"].decode("utf-8")
    data = {"utf-8-sig": text.encode("utf-8-sig"), "utf-16": text.encode("utf-16"),
            "latin-1": text.replace("\n", ",\u00e9t\u00e9\n").replace(
                ",\u00e9t\u00e9\n", ",remarqu\u00e9\n", 1).encode("latin-1"),
            "semicolons": text.replace(",", ";").encode(),
            "decimal commas": text.replace(",", ";").replace(".", ",").encode(),
            "gzip": gzip.compress(text.encode(), mtime=0)}[variant]
    path = tmp_path / "variant.csv"
    path.write_bytes(data)
    read = read_ohlc(path)
    pd.testing.assert_frame_equal(read, reference, check_names=False)
    expected = {"utf-8-sig": "byte-order mark", "utf-16": "UTF-16", "latin-1": "Latin-1",
                "semicolons": "semicolon", "decimal commas": "decimal comma",
                "gzip": "gzip"}[variant]
    assert any(expected in note for note in read.attrs["notes"]), read.attrs["notes"]


@pytest.mark.parametrize("content, fragment", [
    (b"", "is empty"),
    (b"  \n\n", "holds only blank space"),
    (bytes(range(256)) * 8, "is not a text file"),
    (gzip.compress(bytes(range(256)) * 8, mtime=0), "is not a text file"),
    (b"PK\x03\x04" + b"\x00" * 40, "ZIP archive"),
    (b"PAR1" + b"\x00" * 40, "Parquet file under another name"),
    (b"date,close\n", "no data rows"),
    (b"2031-01-06,412.5\n2031-01-07,413.0\n", "has no header line"),
    (b"This is a note about prices.\nNothing here is a table.\n", "no date or time column"),
    (b"date,close\n2031-01-06,412.5\n2031-01-07,413.0,1,2\n", "could not be split"),
])
def test_non_csv_files_are_refused_clearly(content, fragment, tmp_path):
    path = tmp_path / "prices.csv"
    path.write_bytes(content)
    for function in (read_daily, read_intraday, read_ohlc, read_daily_table, prepare_file):
        with pytest.raises(SmleInputError) as error:
            function(path)
        message = str(error.value)
        if function is not read_daily_table or fragment != "no date or time column":
            assert fragment in message or "'date' column" in message, (function, message)


def test_a_directory_is_refused(tmp_path):
    for function in (read_daily, read_intraday, read_ohlc, read_daily_table, prepare_file):
        with pytest.raises(SmleInputError, match="is a directory, not a file"):
            function(tmp_path)
