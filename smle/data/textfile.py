"""Reading a CSV file without tracebacks: encoding, separator and damage, in plain words.

:func:`read_csv_file` decides how to read a file from its bytes before pandas sees it:

* a directory, an empty file, a binary file (NUL or control bytes), a ZIP archive or a
  Parquet file under another name is refused with a :class:`smle.errors.SmleInputError`;
* a gzip-compressed file is decompressed (noted);
* the encoding is UTF-8 (a byte-order mark is dropped), UTF-16 (with a byte-order mark, or
  recognised from its zero bytes), else Latin-1 (noted: every byte is a Latin-1 character,
  and the bytes that are not valid UTF-8 are all non-ASCII, so they can never pass as digits
  or dates and surface as bad rows);
* the separator is the one among ``,``, ``;``, tab and ``|`` that the header line uses most
  (a comma on ties); with a separator other than the comma, numbers written with a decimal
  comma (``101,25``) are read as such (both noted);
* a first line that looks like data rather than column names, a header without data rows,
  and rows that pandas cannot split are refused with the line concerned.

What was inferred is returned as notes (sentences), which readers put in
``attrs["notes"]``.
"""

from __future__ import annotations

import csv
import gzip
import io
import re
import zlib
from pathlib import Path

import pandas as pd

from smle.errors import SmleInputError

ACCEPTED = ("a CSV text file (UTF-8, UTF-16 or Latin-1) with a header row naming the columns "
            "and one data row per line, or a Parquet file (.parquet)")

_SNIFF_BYTES = 65_536
_SEPARATORS = (",", ";", "\t", "|")
_SEPARATOR_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "vertical bar"}
_DECIMAL_COMMA = re.compile(r"(?:^|[;\t|])\s*-?\d+,\d+\s*(?=[;\t|]|$)", re.MULTILINE)
# C0 control characters other than tab, line feed and carriage return.
_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")


def _refuse(path: Path, argument: str, what: str) -> SmleInputError:
    return SmleInputError(f"{argument}={str(path)!r} {what}; accepted: {ACCEPTED}")


def _decode(path: Path, data: bytes, argument: str, notes: list[str]) -> str:
    """Text from bytes: UTF-8 (BOM dropped), UTF-16, else Latin-1; binary data refused."""
    if data.startswith(b"\xef\xbb\xbf"):
        notes.append("the file starts with a UTF-8 byte-order mark, which was ignored")
        data = data[3:]
    elif data.startswith((b"\xff\xfe", b"\xfe\xff")):
        return _decode_utf16(path, data, "utf-16", argument, notes)
    head = data[:_SNIFF_BYTES]
    zeros = head.count(b"\x00")
    if zeros:
        even, odd = head[0::2].count(b"\x00"), head[1::2].count(b"\x00")
        # UTF-16 text of ASCII characters has a zero in every other byte.
        if odd > 0.9 * len(head) / 2 and even == 0:
            return _decode_utf16(path, data, "utf-16-le", argument, notes)
        if even > 0.9 * len(head) / 2 and odd == 0:
            return _decode_utf16(path, data, "utf-16-be", argument, notes)
        raise _refuse(path, argument, f"is not a text file: it holds {zeros} zero byte(s) "
                                      f"in its first {len(head)} bytes (binary data)")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as error:
        line = data[:error.start].count(b"\n") + 1
        notes.append(f"the file is not valid UTF-8 (first invalid byte {data[error.start]:#04x} "
                     f"on line {line}); it was read as Latin-1")
        text = data.decode("latin-1")
    sample = text[:_SNIFF_BYTES]
    controls = len(_CONTROL.findall(sample))
    if controls > max(8, 0.01 * len(sample)):
        raise _refuse(path, argument, f"is not a text file: {controls} control characters in "
                                      f"its first {len(sample)} characters (binary data)")
    return text


def _decode_utf16(path, data, encoding, argument, notes) -> str:
    try:
        text = data.decode(encoding)
    except UnicodeDecodeError as error:
        raise _refuse(path, argument, f"looks like UTF-16 text but byte {error.start} cannot be "
                                      f"decoded ({error.reason})") from None
    notes.append(f"the file is UTF-16 text ({encoding}); it was decoded as such")
    return text.lstrip("\ufeff")


def _separator(path: Path, text: str, argument: str, notes: list[str]) -> tuple[str, str]:
    """The separator and decimal mark, from the header line and the first data lines."""
    lines = [line for line in text[:_SNIFF_BYTES].splitlines() if line.strip()]
    if not lines:
        raise _refuse(path, argument, "holds no text but blank lines")
    header = lines[0]
    counts = {sep: header.count(sep) for sep in _SEPARATORS}
    separator = max(_SEPARATORS, key=lambda sep: (counts[sep], sep == ","))
    if counts[separator] == 0:
        separator = ","
    decimal = "."
    if separator != ",":
        notes.append(f"columns are separated by a {_SEPARATOR_NAMES[separator]} "
                     f"({separator!r}), detected from the header line")
        body = "\n".join(lines[1:50])
        if _DECIMAL_COMMA.search(body):
            decimal = ","
            notes.append("numbers use a decimal comma (e.g. 101,25), detected from the first "
                         "data lines")
    return separator, decimal


def _looks_like_data(name) -> bool:
    text = str(name).strip()
    if not text:
        return False
    try:
        float(text.replace(",", "."))
        return True
    except ValueError:
        pass
    return bool(re.match(r"^\d{1,4}[-/.]\d{1,2}[-/.]\d{1,4}", text))


def read_csv_file(path: Path, argument: str = "source") -> tuple[pd.DataFrame, list[str]]:
    """A raw frame from a CSV file, and notes on what was inferred (see the module docstring).

    Args:
      path: an existing path.
      argument: the argument's name in error messages.
    """
    path = Path(path)
    if path.is_dir():
        raise _refuse(path, argument, "is a directory, not a file")
    try:
        data = path.read_bytes()
    except OSError as error:
        raise _refuse(path, argument, f"cannot be read ({error.strerror or error})") from None
    notes: list[str] = []
    if data.startswith(b"\x1f\x8b"):
        try:
            data = gzip.decompress(data)
        except (OSError, EOFError, zlib.error) as error:
            raise _refuse(path, argument, f"is a damaged gzip file ({error})") from None
        notes.append("the file is gzip-compressed; it was decompressed")
    if not data.strip():
        raise _refuse(path, argument, "is empty" if not data else "holds only blank space")
    if data.startswith(b"PK\x03\x04"):
        raise _refuse(path, argument, "is a ZIP archive; unpack it and pass the CSV file inside")
    if data.startswith(b"PAR1"):
        raise _refuse(path, argument, "is a Parquet file under another name; give it the "
                                      "suffix .parquet")
    text = _decode(path, data, argument, notes)
    separator, decimal = _separator(path, text, argument, notes)
    try:
        frame = pd.read_csv(io.StringIO(text), sep=separator, decimal=decimal)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, csv.Error, ValueError,
            OverflowError) as error:
        detail = " ".join(str(error).split())[:300]
        raise _refuse(path, argument, f"could not be split into columns with the separator "
                                      f"{separator!r}: {detail}") from None
    names = [str(column) for column in frame.columns]
    if names and all(_looks_like_data(name) or name.startswith("Unnamed:") for name in names) \
            and any(_looks_like_data(name) for name in names):
        raise _refuse(path, argument, f"has no header line: its first line {names} looks like "
                                      f"data; add a first line naming the columns "
                                      f"(e.g. date,close)")
    if frame.empty:
        raise _refuse(path, argument, f"has a header ({names}) but no data rows")
    return frame, notes
