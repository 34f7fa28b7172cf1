"""A new user's traps in the data layer: each gives a clear error or a reported note.

The rules are smle's own (design notes: a clear SmleInputError naming the argument, the
value and what is accepted; never a silent NaN or a silently wrong number). The bar rules
are the definition of a bar (low <= open, close <= high; Garman and Klass 1980 and
Parkinson 1980 assume them). The demo data are invented (DEMO DATA ONLY, not real data).
"""

import numpy as np
import pandas as pd
import pytest

from smle.data import (demo_scenario, garman_klass, parkinson, prepare_daily, prepare_file,
                       prepare_from_daily, read_daily, read_intraday, read_ohlc,
                       rogers_satchell)
from smle.errors import SmleInputError


def _closes(n=8):
    dates = pd.bdate_range("2031-06-02", periods=n).strftime("%Y-%m-%d")
    return pd.DataFrame({"date": dates, "close": 100.0 + np.arange(n)})


def _raises(function, *args, **kwargs) -> str:
    with pytest.raises(SmleInputError) as error:
        function(*args, **kwargs)
    return str(error.value)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return demo_scenario(seed=7, n_days=4, folder=tmp_path_factory.mktemp("demo"))


def test_newest_first_file_is_reversed_with_a_note(tmp_path):
    frame = _closes()
    path = tmp_path / "newest_first.csv"
    frame.iloc[::-1].to_csv(path, index=False)
    read = read_daily(path)
    assert list(read["close"]) == list(frame["close"])
    assert any("newest-first order" in note for note in read.attrs["notes"])
    table = prepare_from_daily(path)
    np.testing.assert_allclose(table["return_pct"], 100 * np.diff(np.log(frame["close"])))
    assert any("reversed to oldest-first" in note for note in table.attrs["notes"])


def test_other_disorder_and_duplicates_name_the_rows():
    frame = _closes()
    frame.loc[[3, 4], "date"] = frame.loc[[4, 3], "date"].to_numpy()
    assert "rows must be sorted by date, oldest first" in _raises(read_daily, frame)
    frame = _closes(10)
    frame.loc[[3, 7], "date"] = frame.loc[[2, 6], "date"].to_numpy()
    message = _raises(read_daily, frame)
    assert message.startswith("row 3 (0-based data row; date 2031-06-04)")
    assert "1 more row break the same rule, at data row 7" in message
    assert "repair='drop' (command line: --drop-bad-rows)" in message


@pytest.mark.parametrize("estimator", [parkinson, garman_klass, rogers_satchell])
def test_range_estimators_refuse_impossible_bars(estimator):
    bars = pd.DataFrame({"open": [10.0, 10.0, 10.0], "high": [11.0, 9.0, 11.0],
                         "low": [9.5, 10.5, 9.5], "close": [10.5, 10.0, 10.5]},
                        index=pd.to_datetime(["2031-06-02", "2031-06-03", "2031-06-04"]))
    arguments = ([bars["high"], bars["low"]] if estimator is parkinson else
                 [bars["open"], bars["high"], bars["low"], bars["close"]])
    message = _raises(estimator, *arguments)
    assert "high is below low at row(s) 1 (2031-06-03)" in message
    assert "accepted: low <= high" in message
    if estimator is not parkinson:
        # Garman-Klass would give a negative variance here: a close far outside the range.
        message = _raises(estimator, [10.0, 10.0], [10.1, 11.0], [9.9, 9.5], [10.0, 20.0])
        assert "close lies outside [low, high] at row(s) 1" in message
    message = _raises(parkinson, [11.0, -1.0], [10.0, -2.0])
    assert "high has a non-positive or missing price at row(s) 1" in message


def test_negative_prices_are_refused_with_the_row():
    frame = _closes()
    frame.loc[5, "close"] = -3.0
    message = _raises(prepare_from_daily, frame)
    assert message.startswith("row 5 (")
    assert "close = -3.0 is not positive" in message


def test_intraday_prices_given_as_daily_are_refused(demo):
    for function in (prepare_from_daily, read_daily, read_ohlc):
        message = _raises(function, demo.files["intraday"])
        assert "several rows per calendar date" in message
        assert "390 rows, 09:01:00 to 15:30:00" in message
        assert "--kind intraday" in message
    message = _raises(prepare_file, demo.files["intraday"], kind="daily")
    assert "these are intraday prices" in message


def test_daily_prices_given_as_intraday_are_refused(demo):
    message = _raises(prepare_daily, demo.files["daily"])
    assert "one row per date (4 dates, at midnight)" in message
    assert "prepare_from_daily" in message and "--kind daily" in message


def test_a_returns_file_given_to_prepare_is_refused(tmp_path):
    path = tmp_path / "returns.csv"
    pd.DataFrame({"date": _closes()["date"], "return": np.linspace(-1, 1, 8)}).to_csv(
        path, index=False)
    for kind in ("auto", "daily"):
        message = _raises(prepare_file, path, kind=kind)
        assert "has no price column, only returns" in message
        assert "smle fit FILE --column NAME" in message


def test_text_in_a_number_column_names_column_row_and_text():
    frame = _closes()
    frame["close"] = frame["close"].astype(object)
    frame.loc[4, "close"] = "n/a"
    message = _raises(read_daily, frame)
    assert message.startswith("row 4 (")
    assert "close = 'n/a' is text, not a number" in message
    assert "1 of 8 cells of column 'close' are text" in message


def test_a_price_column_of_any_name(tmp_path):
    frame = _closes().rename(columns={"close": "Schlusskurs"})
    message = _raises(prepare_from_daily, frame)
    assert "price_column='...' (command line: --price-column NAME)" in message
    table = prepare_from_daily(frame, price_column="Schlusskurs")
    np.testing.assert_allclose(table["return_pct"], 100 * np.diff(np.log(frame["Schlusskurs"])))
    path = tmp_path / "closes.csv"
    frame.to_csv(path, index=False)
    written = prepare_file(path, price_column="Schlusskurs")
    pd.testing.assert_frame_equal(written, table, check_freq=False, check_names=False)


def test_zero_returns_are_counted_and_kept():
    frame = _closes()
    frame.loc[[3, 6], "close"] = frame.loc[[2, 5], "close"].to_numpy()
    table = prepare_from_daily(frame)
    assert table.attrs["n_zero_returns"] == 2
    assert (table["return_pct"] == 0.0).sum() == 2 and len(table) == 7
    note = next(note for note in table.attrs["notes"] if "exactly zero" in note)
    assert "2 of 7 daily returns" in note and "kept as observations" in note
    assert "2031-06-05" in note
    returns = pd.DataFrame({"date": frame["date"], "return": [0.0, 1.0, 0.0, -2.0, 0.0, 1.0,
                                                               0.5, 0.2]})
    read = read_daily(returns)
    assert read.attrs["n_zero_returns"] == 3
    assert any("3 of 8 returns are exactly zero" in note for note in read.attrs["notes"])


def test_day_first_dates_are_read_as_such_with_a_note():
    frame = _closes()
    frame["date"] = pd.to_datetime(frame["date"]).dt.strftime("%d/%m/%Y")
    read = read_daily(frame)
    assert list(read.index.strftime("%Y-%m-%d")) == list(_closes()["date"])
    assert any("read day first" in note for note in read.attrs["notes"])


@pytest.mark.parametrize("arguments, fragment", [
    ({"measures": "realized_variance"}, None),
    ({"measures": "realised"}, "unknown names ['realised']"),
    ({"measures": 5}, "measures=5 is not accepted; give a name or a list of names"),
    ({"subsamples": "x"}, "subsamples='x' is not accepted; use a positive integer"),
    ({"subsamples": 2.5}, "subsamples=2.5 is not accepted"),
    ({"subsamples": 0}, "subsamples=0 is not accepted"),
    ({"min_observations": -1}, "min_observations=-1 is not accepted"),
])
def test_list_and_integer_arguments(demo, arguments, fragment):
    if fragment is None:
        table = prepare_daily(demo.intraday, "5min", **arguments)
        assert table.columns.tolist()[3:] == ["realized_variance_pct2", "n_observations"]
    else:
        assert fragment in _raises(prepare_daily, demo.intraday, "5min", **arguments)


@pytest.mark.parametrize("arguments, fragment", [
    ({"n_days": 0}, "n_days=0 is not accepted; use a positive integer"),
    ({"n_days": -5}, "n_days=-5 is not accepted"),
    ({"n_days": "ten"}, "n_days='ten' is not accepted"),
    ({"phi": 1.2}, "phi=1.2 is not accepted; use -1 < phi < 1"),
    ({"start_price": 0.0}, "start_price=0.0 is not accepted"),
    ({"step_seconds": 7}, "step_seconds must divide the bar"),
])
def test_demo_arguments(arguments, fragment):
    assert fragment in _raises(demo_scenario, 1, **arguments)


def test_session_drops_are_reported_by_reason(demo):
    table = prepare_daily(demo.intraday, "5min", session_open="10:00", session_close="15:00")
    # 09:01..09:59 (59 bars) before the open and 15:01..15:30 (30) after the close, per day.
    assert table.attrs["outside_session"] == {"before_open": 4 * 59, "after_close": 4 * 30}
    assert table.attrs["n_outside_session"] == 4 * 89
    note = next(note for note in table.attrs["notes"] if "outside the session" in note)
    assert "236 before the open, 120 after the close" in note
    default = prepare_daily(demo.intraday, "5min")
    assert default.attrs["n_outside_session"] == 0
    assert any("inferred from the data" in note and "--session-open" in note
               for note in default.attrs["notes"])


def test_separate_date_and_time_columns_are_joined():
    frame = pd.DataFrame({"Date": ["2031-01-06"] * 3 + ["2031-01-07"] * 3,
                          "Time": ["09:30", "09:31", "09:32"] * 2,
                          "Price": [1.0, 1.1, 1.2, 1.3, 1.2, 1.1]})
    read = read_intraday(frame)
    assert str(read.index[4]) == "2031-01-07 09:31:00+00:00"
    assert any("joined from the columns 'Date'" in note for note in read.attrs["notes"])


def test_prepare_file_options_and_output_paths(demo, tmp_path):
    message = _raises(prepare_file, demo.files["daily"], tmp_path / "out.csv", interval_x=3)
    assert "interval_x=3: not an option of prepare_from_daily (daily input)" in message
    message = _raises(prepare_file, demo.files["daily"], tmp_path)
    assert "is a directory; give a file path" in message
    message = _raises(prepare_file, demo.files["daily"], tmp_path / "missing" / "out.csv")
    assert "does not exist; create it first" in message
    message = _raises(prepare_from_daily, demo.files["daily"], measures=["realized_variance"])
    assert "need intraday prices" in message


def test_a_short_last_day_does_not_shorten_the_inferred_session(demo):
    # Day 1 ends at 15:30, day 2 (cut short) at 09:33: a tie, resolved to the wider session,
    # so the short day is reported as too sparse instead of day 1 being cut at 09:33.
    message = _raises(prepare_daily, demo.intraday.iloc[:390 + 33], "5min")
    assert "33 rows inside the session 09:00-15:30" in message
