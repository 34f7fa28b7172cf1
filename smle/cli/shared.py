"""What the commands share: reading observations (see :mod:`smle.cli.observations`), a model and
its options (see :mod:`smle.cli.options`), reading a saved fit, and the data options. Every
command module imports from here (never from another command module). Nothing here imports
JAX or pandas at import time, so that ``smle --help`` is quick.
"""

from __future__ import annotations

from smle.cli.observations import Observations, read_observations, say
from smle.cli.options import add_option_flag, describe_options, model_from_args
from smle.errors import SmleInputError

__all__ = ["Observations", "add_column_options", "add_option_flag", "describe_options", "model_from_args",
           "read_observations", "read_saved_fit", "say"]


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
