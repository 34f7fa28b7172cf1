"""Model options on the command line: ``--option NAME=VALUE`` (repeatable) and what ``smle models``
says about them.

A model's options are the fields of its dataclass (``link`` and ``realized`` of garch-mix,
``init_var`` of local-level): nothing here names a model. A value is converted by the field's
type (true/false for a flag, a number for a number); what a field accepts is what the model's
own check says when given a value it cannot take (the "accepted: ..." of its error), else the
field's type in words.
"""

from __future__ import annotations

import dataclasses
import re

from smle.errors import SmleInputError

_TRUE = ("true", "yes", "on", "1")
_FALSE = ("false", "no", "off", "0")
_TYPE_WORDS = {"bool": "true or false", "int": "an integer", "float": "a number", "str": "text"}


class _NotAValue:
    """A value no option accepts: the model's check then states what it accepts."""

    def __repr__(self) -> str:
        return "<probe>"


def _type_name(field: dataclasses.Field) -> str:
    annotation = field.type if isinstance(field.type, str) else getattr(field.type, "__name__", "")
    return annotation if annotation in _TYPE_WORDS else type(field.default).__name__


def option_fields(model_class) -> list[dataclasses.Field]:
    """The constructor options of a registered model class (its dataclass fields)."""
    return [f for f in dataclasses.fields(model_class) if f.init]


def accepted_text(model_class, field: dataclasses.Field) -> str:
    """What ``field`` accepts, in words, from the model's own check of a bad value."""
    if _type_name(field) == "bool":
        return _TYPE_WORDS["bool"]
    try:
        model_class(**{field.name: _NotAValue()})
    except SmleInputError as error:
        text = str(error)
        if "accepted:" in text:
            return text.split("accepted:", 1)[1].strip().rstrip(".")
    except Exception:  # noqa: BLE001  (a model without a check of this option fails elsewhere)
        pass
    return _TYPE_WORDS.get(_type_name(field), "a value")


def _shown(value) -> str:
    return str(value).lower() if isinstance(value, bool) else repr(value)


def _alternatives(model_class, field: dataclasses.Field) -> list:
    """The other values of an option with a short list of values (a flag, named choices)."""
    if _type_name(field) == "bool":
        return [not field.default]
    if _type_name(field) == "str":
        return [v for v in re.findall(r"'([^']*)'", accepted_text(model_class, field)) if v != field.default]
    return []


def _difference(base, other) -> str:
    """What changes between two instances of a model: parameters and observed series."""
    before, after = base.param_names, other.param_names
    parts = []
    added = [f"{constraint.region(n)}" for n, constraint in other.constraints().items() if n not in before]
    if added:
        parts.append("adds " + ", ".join(added))
    dropped = [n for n in before if n not in after]
    if dropped:
        parts.append("drops " + ", ".join(dropped))
    if other.n_series != base.n_series:
        parts.append("observed series: " + ", ".join(other.series_labels[:other.n_series]))
    return "; ".join(parts)


def describe_options(model_class) -> list[str]:
    """Lines on the options of a model (for ``smle models``): each one's default and accepted
    values, and what a different value of a flag or a named choice changes."""
    fields = option_fields(model_class)
    if not fields:
        return []
    lines = ["options (--option NAME=VALUE):"]
    base = model_class()
    for field in fields:
        lines.append(f"  {field.name}: default {_shown(field.default)}; accepted: {accepted_text(model_class, field)}")
        for value in _alternatives(model_class, field):
            change = _difference(base, model_class(**{field.name: value}))
            if change:
                lines.append(f"    with {field.name}={_shown(value).strip(chr(39))}: {change}")
    return lines


def _convert(model_name: str, field: dataclasses.Field, text: str):
    kind = _type_name(field)
    try:
        if kind == "bool":
            if text.lower() not in _TRUE + _FALSE:
                raise ValueError
            return text.lower() in _TRUE
        if kind == "int":
            return int(text)
        if kind == "float":
            return float(text)
    except ValueError:
        raise SmleInputError(f"--option {field.name}={text!r} is not accepted by model '{model_name}'; "
                             f"accepted: {_TYPE_WORDS[kind]}") from None
    return text


def parse_options(model_class, texts) -> dict:
    """``["link=lognormal", "realized=true"]`` -> ``{"link": "lognormal", "realized": True}``."""
    fields = {f.name: f for f in option_fields(model_class)}
    options = {}
    for item in texts or ():
        name, sep, value = item.partition("=")
        name = name.strip().replace("-", "_")
        if not sep or not name:
            raise SmleInputError(f"--option {item!r} is not accepted; accepted: NAME=VALUE, e.g. link=lognormal")
        if name not in fields:
            known = ", ".join(fields) or "none"
            raise SmleInputError(f"--option {item!r}: model '{model_class.name}' has no option {name!r}; "
                                 f"its options: {known} (see 'smle models')")
        options[name] = _convert(model_class.name, fields[name], value.strip())
    return options


def model_from_args(name: str, option_texts) -> object:
    """The model ``name`` with the options of ``--option NAME=VALUE`` items."""
    from smle.models import get_model

    model_class = type(get_model(name))  # an unknown name: the registry's error naming the models
    return get_model(name, **parse_options(model_class, option_texts))


def add_option_flag(parser) -> None:
    """``--option NAME=VALUE``, repeatable: a model option (see ``smle models``)."""
    parser.add_argument("--option", action="append", default=[], metavar="NAME=VALUE",
                        help="a model option, e.g. --option link=lognormal --option realized=true "
                             "(repeatable; 'smle models' lists each model's options)")
