"""The command line, run in-process through smle.cli."""

import json

import numpy as np
import pandas as pd
import pytest

import smle
from smle import cli

from conftest import JPR_DESIGNS


@pytest.fixture(scope="module")
def returns_csv(tmp_path_factory):
    y, _ = smle.simulate("sv", JPR_DESIGNS["phi=0.95"], 500, seed=77)
    folder = tmp_path_factory.mktemp("cli")
    frame = pd.DataFrame({"date": pd.bdate_range("2031-01-06", periods=500).strftime("%Y-%m-%d"), "ret": 100 * y})
    path = folder / "returns.csv"
    frame.to_csv(path, index=False)
    return path, frame


def test_draws_defaults_are_the_library_defaults():
    """The command line writes its --draws defaults out (importing the engine at parse time would
    slow every command's start); they must stay those of smle.fit and smle.check."""
    import inspect

    from smle.cli.app import build_parser

    commands = {"fit": smle.fit, "demo": smle.fit, "check": smle.check, "compare": smle.fit, "backtest": smle.fit,
                "forecast": smle.fit}
    parser = build_parser()
    subparsers = next(a for a in parser._actions if a.dest == "command").choices
    for command, entry in commands.items():
        expected = inspect.signature(entry).parameters["n_draws"].default
        assert subparsers[command].get_default("draws") == expected, command


def test_help_everywhere(capsys):
    for argv in (["--help"], ["fit", "--help"], ["models", "--help"], ["demo", "--help"], ["prepare", "--help"]):
        with pytest.raises(SystemExit) as exit_info:
            cli.main(argv)
        assert exit_info.value.code == 0
        assert "usage: smle" in capsys.readouterr().out


def test_models_lists_the_registry(capsys):
    assert cli.main(["models"]) == 0
    out = capsys.readouterr().out
    for name in smle.model_names():
        assert name in out
    assert "-1 < phi < 1" in out


def test_fit_prints_the_summary_and_writes_a_report(returns_csv, tmp_path, capsys):
    path, frame = returns_csv
    report = tmp_path / "report"
    code = cli.main(["fit", "--model", "sv", str(path), "--report", str(report), "--quiet"])
    out = capsys.readouterr().out
    assert code == 0
    assert "log-likelihood" in out and "not investment advice" in out
    stored = json.loads((report / "result.json").read_text())
    assert stored["model"] == "sv" and stored["n_obs"] == len(frame)
    # the same fit through the library gives the same numbers; an exact fit (the default for a
    # one-dimensional state) draws no weights, so no weight figure; an EIS fit has one
    direct = smle.fit("sv", frame["ret"].to_numpy())
    assert stored["params"] == direct.params and stored["eis"]["method"] == "exact"
    assert (report / "factor.png").stat().st_size > 10_000 and not (report / "log_weights.png").exists()
    simulated = tmp_path / "simulated"
    assert cli.main(["fit", "--model", "sv", str(path), "--report", str(simulated), "--quiet", "--method", "eis",
                     "--particles", "0"]) == 0
    assert json.loads((simulated / "result.json").read_text())["eis"]["n_draws"] == 64
    assert (simulated / "log_weights.png").stat().st_size > 10_000


def test_missing_values_are_located_and_can_be_dropped(returns_csv, tmp_path, capsys):
    _, frame = returns_csv
    broken = frame.copy()
    broken.loc[[3, 10], "ret"] = np.nan
    path = tmp_path / "missing.csv"
    broken.to_csv(path, index=False)
    assert cli.main(["fit", str(path), "--quiet"]) == 2
    err = capsys.readouterr().err
    # the data layer's reader names the first bad row, its file line and date, and the flag
    assert "line 5 of missing.csv; date 2031-01-09" in err and "--drop-bad-rows" in err


def test_non_numeric_column_and_prices(returns_csv, tmp_path, capsys):
    _, frame = returns_csv
    text = frame.copy().astype({"ret": object})
    text.loc[7, "ret"] = "n/a?"
    path = tmp_path / "text.csv"
    text.to_csv(path, index=False)
    assert cli.main(["fit", str(path), "--column", "ret", "--quiet"]) == 2
    assert "line 9 of text.csv" in capsys.readouterr().err
    prices = pd.DataFrame({"close": 50 * np.exp(np.cumsum(frame["ret"].to_numpy() / 100))})
    price_path = tmp_path / "prices.csv"
    prices.to_csv(price_path, index=False)
    assert cli.main(["fit", str(price_path), "--quiet"]) == 2
    assert "looks like prices" in capsys.readouterr().err
    assert cli.main(["fit", str(tmp_path / "absent.csv")]) == 2
    assert "does not exist" in capsys.readouterr().err


def test_drop_missing_fits_the_remaining_rows(returns_csv, tmp_path, capsys):
    _, frame = returns_csv
    broken = frame.copy()
    broken.loc[[3, 10], "ret"] = np.nan
    path = tmp_path / "missing.csv"
    broken.to_csv(path, index=False)
    report = tmp_path / "dropped"
    assert cli.main(["fit", str(path), "--drop-missing", "--quiet", "--report", str(report)]) == 0
    assert capsys.readouterr().err.count("dropped row") == 2
    assert json.loads((report / "result.json").read_text())["n_obs"] == len(frame) - 2


def test_prepare_turns_demo_intraday_bars_into_a_daily_table(tmp_path, capsys):
    from smle.data import demo_scenario, read_daily_table
    from smle.data.demo import SESSION_CLOSE, SESSION_OPEN, VENUE_TIMEZONE

    scenario = demo_scenario(seed=3, n_days=15, folder=tmp_path)
    out = tmp_path / "daily.csv"
    code = cli.main(["prepare", str(scenario.files["intraday"]), "--output", str(out), "--interval", "5min",
                     "--session-open", SESSION_OPEN, "--session-close", SESSION_CLOSE, "--timezone", VENUE_TIMEZONE])
    assert code == 0
    table = read_daily_table(out)
    assert len(table) == 14  # the first day only supplies a previous close
    assert {"return_pct", "realized_variance_pct2"} <= set(table.columns)
    # daily returns equal the log change of the demo's daily closes (in percent)
    closes = scenario.daily["close"].to_numpy()
    np.testing.assert_allclose(table["return_pct"].to_numpy(), 100 * np.diff(np.log(closes)), atol=1e-6)


# -- issue 18, bad input on the command line: each stops with exit code 2 and names what is wrong --

def test_a_report_folder_that_is_a_file_is_refused_before_fitting(returns_csv, tmp_path, capsys):
    path, _ = returns_csv
    existing = tmp_path / "notes.txt"
    existing.write_text("a file, not a folder")
    for report, message in ((existing, f"--report '{existing}' is an existing file, not a folder"),
                            (existing / "report", f"'{existing}' is a file, so no folder can be made inside it")):
        assert cli.main(["fit", str(path), "--quiet", "--report", str(report)]) == 2
        assert message in capsys.readouterr().err
    assert existing.read_text() == "a file, not a folder"


@pytest.mark.parametrize("days", ["0", "-5", "10"])
def test_demo_with_too_few_days_names_the_flag(days, tmp_path, capsys):
    assert cli.main(["demo", "--days", days, "--quiet", "--report", str(tmp_path / "demo")]) == 2
    assert f"--days {days} is not accepted; accepted: a whole number of days >= 11" in capsys.readouterr().err
    assert not (tmp_path / "demo").exists()  # refused before any data was written


def test_text_in_the_only_numeric_column_is_named_with_its_value(returns_csv, tmp_path, capsys):
    _, frame = returns_csv
    text = frame.copy().astype({"ret": object})
    text.loc[7, "ret"] = "n/a?"
    dated, plain = tmp_path / "dated.csv", tmp_path / "plain.csv"
    text.to_csv(dated, index=False)
    text[["ret"]].to_csv(plain, index=False)
    # before: "has no numeric column" (the text cell made pandas read the whole column as text)
    assert cli.main(["fit", str(dated), "--quiet"]) == 2
    assert "line 9 of dated.csv; date 2031-01-15): ret = 'n/a?' is text, not a number" in capsys.readouterr().err
    assert cli.main(["fit", str(plain), "--quiet"]) == 2
    assert "column 'ret' of" in (err := capsys.readouterr().err) and "the first 'n/a?', at file line(s) [9]" in err


def test_a_damaged_result_file_is_named_by_diagnose_and_check(returns_csv, tmp_path, capsys):
    path, _ = returns_csv
    damaged = tmp_path / "result.json"
    damaged.write_text('{"format": "smle.fit/1", "model": "sv", "params": {"mu": ')
    assert cli.main(["diagnose", str(damaged)]) == 2
    assert f"result file: file '{damaged}' is not complete JSON" in capsys.readouterr().err
    assert cli.main(["check", str(path), "--from-fit", str(damaged)]) == 2
    assert f"--from-fit: file '{damaged}' is not complete JSON" in capsys.readouterr().err


def test_check_refuses_prices_without_the_prices_flag(returns_csv, tmp_path, capsys):
    _, frame = returns_csv
    prices = pd.DataFrame({"date": frame["date"], "close": 50 * np.exp(np.cumsum(frame["ret"].to_numpy() / 100))})
    price_path = tmp_path / "prices.csv"
    prices.to_csv(price_path, index=False)
    assert cli.main(["check", str(price_path), "--params", "mu=0,phi=0.95,sigma_eta=0.26", "--quiet"]) == 2
    assert "y looks like prices, not returns" in capsys.readouterr().err


def test_prepare_output_inside_a_file_says_so(tmp_path, capsys):
    from smle.data import demo_scenario

    scenario = demo_scenario(seed=3, n_days=3, folder=tmp_path)
    blocker = tmp_path / "blocker"
    blocker.write_text("")
    assert cli.main(["prepare", str(scenario.files["daily"]), "--output", str(blocker / "daily.csv")]) == 2
    assert f"'{blocker}' is a file, not a folder" in capsys.readouterr().err
