"""The study file format: its documentation matches the code, and `smle study example` writes a
file that loads and runs."""

import argparse
import dataclasses
import re
import tomllib

import pytest

from smle.cli.study import add_study_commands
from smle.errors import SmleInputError
from smle.validation import MIN_DRAWS
from smle.study import Estimator, load_study, run_study, study_from_mapping, study_status
from smle.study.spec import _DESIGN_KEYS, _OUTPUT_KEYS, _STUDY_KEYS, format_text


def cli(argv):
    parser = argparse.ArgumentParser(prog="smle")
    add_study_commands(parser.add_subparsers(dest="command", required=True))
    args = parser.parse_args(argv)
    return args.handler(args)


def documented_keys(text):
    """``{key: description}`` of the lines ``  key   description`` of the format text."""
    return {m.group(1): m.group(2) for m in re.finditer(r"^  ([a-z_]+) +(\S.*)$", text, re.MULTILINE)}


def test_every_key_is_documented_with_its_default():
    text = format_text()
    keys = documented_keys(text)
    for key in _STUDY_KEYS | _OUTPUT_KEYS | _DESIGN_KEYS:
        assert key in keys, f"key {key!r} of the study file is not in the format text"
    for field in dataclasses.fields(Estimator):
        description = keys[field.name]
        found = re.match(r"(\S+) \(default", description) or re.search(r"default (\S+)", description)
        assert found, (field.name, description)
        shown = tomllib.loads(f"v = {found.group(1).rstrip('.;,')}")["v"]  # TOML spelling of the value
        assert shown == field.default and type(shown) is type(field.default), (field.name, shown, field.default)
    assert f"n_draws       integer >= {MIN_DRAWS}" in text


def test_the_documented_example_loads(tmp_path):
    text = format_text()
    example = text[text.index("Example:") + len("Example:"):text.index("Run it with")]
    study = study_from_mapping(tomllib.loads(example), base=tmp_path)
    assert [(d.name, d.n_periods, d.replications, d.estimator.n_draws) for d in study.designs] == [
        ("T=500", 500, 100, 32), ("T=2000", 2000, 100, 32)]
    assert study.store == str(tmp_path / "pilot.sqlite") and study.output == str(tmp_path / "pilot-summary")


def test_help_shows_the_format(capsys):
    with pytest.raises(SystemExit):
        cli(["study", "--help"])
    out = capsys.readouterr().out
    assert "Study file format" in out and "master_seed" in out and "seed_offset" in out and "example" in out


def test_example_command_writes_a_study_that_loads_and_runs(tmp_path, capsys):
    path = tmp_path / "first.toml"
    assert cli(["study", "example", str(path)]) == 0
    assert "example study written" in capsys.readouterr().out
    study = load_study(path)
    assert [d.name for d in study.designs] == ["phi=0.95, T=200", "phi=0.95, T=800", "phi=0.90, T=200"]
    assert study.store == str(tmp_path / "example.sqlite")
    assert all(d.model == "sv" and d.replications == 20 and d.estimator.n_draws == 16 for d in study.designs)
    with pytest.raises(SmleInputError, match="already exists"):
        cli(["study", "example", str(path)])
    with pytest.raises(SmleInputError, match="ending in .toml"):
        cli(["study", "example", str(tmp_path / "first.txt")])
    # One replication (the first design: sv, T = 200, 16 draws, the shape of tests/test_study.py).
    report = run_study(study, backend="inprocess", max_replications=1, progress=False)
    assert (report.completed, report.failed) == (1, 0)
    status = study_status(study.store)
    assert (status["ok"], status["planned"]) == (1, 60)
    assert [d["ok"] for d in status["designs"]] == [1, 0, 0]
