"""The error smle raises for bad input: it names the argument, the value and what is accepted;
and :func:`load_saved`, which turns a saved JSON file that cannot be read into that error."""

from __future__ import annotations

import json
from pathlib import Path


class SmleInputError(ValueError):
    """Bad input to an smle function (data, parameters or settings)."""


def describe(value) -> str:
    """A short printable form of a bad value for error messages."""
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


class EISBreakdownError(FloatingPointError):
    """The simulated likelihood cannot be trusted at these parameters (a collapsed or failed
    importance sampler whose error is not measurable), and no repair helped; the message says
    what was measured."""


def load_saved(build, text_or_path, expected: str):
    """``build(data)`` for the JSON object in ``text_or_path`` (JSON text, or the path of a file
    holding it). Anything that stops it (no such file, a folder, binary or truncated content, JSON
    of another kind) is a :class:`SmleInputError` naming the file and saying what ``expected`` is."""
    text = str(text_or_path)
    is_text = text.lstrip().startswith("{")
    subject = "the JSON text given" if is_text else f"file {text!r}"
    try:
        if not is_text:
            text = Path(text_or_path).read_text(encoding="utf-8")
        data = json.loads(text)
    except FileNotFoundError:
        raise SmleInputError(f"{subject} does not exist; accepted: {expected}") from None
    except IsADirectoryError:
        raise SmleInputError(f"{subject} is a folder; accepted: {expected}") from None
    except UnicodeDecodeError:
        raise SmleInputError(f"{subject} is not text (binary content); accepted: {expected}") from None
    except json.JSONDecodeError as error:
        raise SmleInputError(f"{subject} is not complete JSON ({error.msg} at line {error.lineno} column "
                             f"{error.colno}: truncated or damaged?); accepted: {expected}") from None
    except OSError as error:
        raise SmleInputError(f"{subject} cannot be read ({error.strerror}); accepted: {expected}") from None
    try:
        if not isinstance(data, dict):
            raise TypeError(f"it holds a JSON {type(data).__name__}, not an object")
        return build(data)
    except KeyError as error:
        raise SmleInputError(f"{subject} is not {expected}: the entry {error} is missing") from None
    except (TypeError, ValueError, AttributeError) as error:
        raise SmleInputError(f"{subject} is not {expected}: {error}") from None
