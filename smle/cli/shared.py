"""What the commands share: reading observations (see :mod:`smle.cli.observations`), a model and
its options (see :mod:`smle.cli.options`), reading a saved fit, and the data options. Every
command module imports from here (never from another command module). Nothing here imports
JAX or pandas at import time, so that ``smle --help`` is quick.
"""

from __future__ import annotations

from smle.cli.observations import Observations, read_observations, say
from smle.cli.options import add_option_flag, describe_options, model_from_args
from smle.errors import SmleInputError

__all__ = ["Observations", "add_column_options", "add_fix_option", "add_option_flag", "check_report_folder",
           "describe_options", "model_from_args", "parse_fixed", "parse_model_spec", "read_observations",
           "read_saved_fit", "say", "write_result_files"]


FIT_DRAWS = 64
"""Default --draws of the commands that fit (fit, demo, compare, forecast, backtest): smle.fit's
n_draws (smle.engine.sampler.FIT_DRAWS), written out so that parsing does not import the engine;
tests/test_cli.py holds the two equal."""


def read_saved_fit(path: str, argument: str):
    """A :class:`~smle.FitResult` from its JSON file, or an error naming ``argument`` and the file."""
    from pathlib import Path

    import smle

    try:
        return smle.FitResult.from_json(Path(path))
    except SmleInputError as error:  # it names the file and what is wrong
        raise SmleInputError(f"{argument}: {error}; 'smle fit --report' writes one (result.json)") from None


def check_report_folder(path: str, argument: str = "--report") -> None:
    """Refuse, before any work, a report folder that cannot be made: an existing file, a path
    inside a file, or a place without write permission. A missing folder is fine: the writers
    create it with its parents."""
    import os
    from pathlib import Path

    folder = Path(path)
    accepted = "accepted: a folder (created, with its parents, if missing; the report's files in it are replaced)"
    if folder.exists() and not folder.is_dir():
        raise SmleInputError(f"{argument} {path!r} is an existing file, not a folder; {accepted}")
    existing = next(p for p in (folder.absolute(), *folder.absolute().parents) if p.exists())
    if not existing.is_dir():
        raise SmleInputError(f"{argument} {path!r}: {str(existing)!r} is a file, so no folder can be made "
                             f"inside it; {accepted}")
    if not os.access(existing, os.W_OK | os.X_OK):
        raise SmleInputError(f"{argument} {path!r}: no permission to write in {str(existing)!r}; {accepted}")


def add_column_options(parser, which: str = "") -> None:
    """``--column`` (repeatable), ``--prices`` and ``--drop-missing``: how a file's columns become
    the observations (see :func:`read_observations`)."""
    parser.add_argument("--column", action="append", metavar="NAME",
                        help=f"column {which}to use; give it once per observed series, in the model's order "
                             "(e.g. --column ret --column rv for realized-sv). Default: the return (and realized "
                             "measure) of a table written by 'smle prepare', else the only numeric column")
    parser.add_argument("--prices", action="store_true",
                        help=f"the (first) column {which}holds prices: convert to percent log returns")
    parser.add_argument("--drop-bad-rows", "--drop-missing", dest="drop_missing", action="store_true",
                        help=f"drop rows {which}with a missing or bad value (each one reported) instead of failing")


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


def write_result_files(result, folder, stem: str) -> list[str]:
    """``stem``.txt (summary), .json, .csv (``to_frame``) and .png (``figure``) of a forecast or a
    backtest in ``folder`` (created if needed); the file names."""
    from pathlib import Path

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    names = [f"{stem}.txt", f"{stem}.json", f"{stem}.csv", f"{stem}.png"]
    (folder / names[0]).write_text(result.summary() + "\n")
    result.to_json(folder / names[1])
    result.to_frame().to_csv(folder / names[2])
    result.figure(folder / names[3])
    return names
