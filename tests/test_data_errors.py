"""Each kind of bad input gets an error naming the row (position and key) and the rule.

The rules are smle's own (design notes, section 8: "a clear error naming the row, never a
silent NaN"); the bar rules are the definitions of a bar (low <= open, close <= high).
"""

import logging

import numpy as np
import pandas as pd
import pytest

from smle.data import prepare_daily, prepare_from_daily, read_daily, read_intraday, read_ohlc
from smle.errors import SmleInputError


SESSION = {"session_open": "09:30", "session_close": "16:00"}


def _daily_bars(n=6):
    dates = pd.bdate_range("2031-06-02", periods=n).strftime("%Y-%m-%d")
    close = 100 + np.arange(n, dtype=float)
    return pd.DataFrame({"date": dates, "open": close - 0.5, "high": close + 1.0,
                         "low": close - 1.0, "close": close})


def _minute_prices(days=3, per_day=390, start="2031-06-02"):
    frames = []
    for day in pd.bdate_range(start, periods=days):
        stamps = day + pd.Timedelta(hours=9, minutes=30) + pd.to_timedelta(
            np.arange(1, per_day + 1), unit="min")
        frames.append(pd.DataFrame({"timestamp": stamps.strftime("%Y-%m-%d %H:%M:%S"),
                                    "price": 50 + 0.01 * np.arange(per_day)}))
    return pd.concat(frames, ignore_index=True)


def _raises(function, *args, **kwargs) -> str:
    with pytest.raises(SmleInputError) as error:
        function(*args, **kwargs)
    return str(error.value)


def test_non_positive_price():
    frame = _daily_bars().drop(columns=["open", "high", "low"])
    frame.loc[3, "close"] = 0.0
    message = _raises(read_daily, frame)
    assert message.startswith("row 3 (0-based data row; date 2031-06-05")
    assert "close = 0.0 is not positive" in message
    assert "prices in column 'close' must be positive" in message


def test_missing_price_in_a_file(tmp_path):
    frame = _minute_prices(days=1, per_day=20)
    frame.loc[7, "price"] = np.nan
    path = tmp_path / "ticks.csv"
    frame.to_csv(path, index=False)
    message = _raises(read_intraday, path)
    assert message.startswith("row 7 (0-based data row; line 9 of ticks.csv; timestamp "
                              "2031-06-02 09:38:00+00:00)")
    assert "column 'price' must hold a number in every row" in message


def test_unreadable_timestamp():
    frame = _minute_prices(days=1, per_day=20)
    frame.loc[4, "timestamp"] = "not a time"
    message = _raises(read_intraday, frame)
    assert message.startswith("row 4 (")
    assert "'not a time' is missing or unreadable" in message
    assert "every row needs a readable timestamp" in message


def test_unsorted_timestamps():
    frame = _minute_prices(days=1, per_day=20)
    frame.loc[[10, 11]] = frame.loc[[11, 10]].to_numpy()
    message = _raises(read_intraday, frame)
    assert message.startswith("row 11 (0-based data row; timestamp 2031-06-02 09:41:00")
    assert "rows must be sorted by timestamp" in message


def test_duplicate_timestamps():
    frame = _minute_prices(days=1, per_day=20)
    frame.loc[12, "timestamp"] = frame.loc[11, "timestamp"]
    message = _raises(read_intraday, frame)
    assert message.startswith("row 12 (0-based data row; timestamp 2031-06-02 09:42:00")
    assert "repeats the timestamp of the row at position 11" in message
    assert "each timestamp may appear only once" in message


def test_high_below_low():
    frame = _daily_bars()
    frame.loc[2, ["high", "low"]] = [99.0, 103.0]
    message = _raises(read_ohlc, frame)
    assert message.startswith("row 2 (0-based data row; date 2031-06-04")
    assert "high = 99.0 is below low = 103.0" in message
    assert "the high must not be below the low" in message


def test_close_outside_the_range():
    frame = _daily_bars()
    frame.loc[4, "close"] = 110.0
    message = _raises(prepare_from_daily, frame)
    assert message.startswith("row 4 (0-based data row; date 2031-06-06")
    assert "close = 110.0 is outside [low = 103.0, high = 105.0]" in message
    assert "the close must lie inside the bar's range" in message


def test_intraday_bar_with_open_outside_range():
    stamps = pd.date_range("2031-06-02 09:31", periods=5, freq="1min", tz="UTC")
    bars = pd.DataFrame({"timestamp": stamps, "open": [1.0, 1.0, 2.0, 1.0, 1.0],
                         "high": 1.2, "low": 0.9, "close": 1.1})
    message = _raises(read_intraday, bars)
    assert message.startswith("row 2 (0-based data row; timestamp 2031-06-02 09:33:00+00:00)")
    assert "the open must lie inside the bar's range" in message


def test_too_few_observations_for_the_interval():
    frame = _minute_prices(days=4)
    # Day 3 (2031-06-04) keeps only every tenth minute: 39 rows, fewer than the 78 five-minute
    # intervals of a 09:30-16:00 session.
    day = frame["timestamp"].str.startswith("2031-06-04")
    sparse = frame[~day | (np.arange(len(frame)) % 10 == 0)].reset_index(drop=True)
    message = _raises(prepare_daily, sparse, "5min", **SESSION)
    assert message.startswith("day 2031-06-04 (session day 2, starting at row 780 (0-based data row; "
                                  "timestamp 2031-06-04 09:31:00+00:00)): ")
    assert "39 rows inside the session 09:30-16:00" in message
    assert "a session needs at least 78 rows for interval 5min" in message
    # A longer interval needs fewer rows: 13 half-hours.
    table = prepare_daily(sparse, "30min", **SESSION)
    assert len(table) == 3


def test_sparse_day_dropped_on_request_is_logged_and_recorded(caplog):
    frame = _minute_prices(days=4)
    day = frame["timestamp"].str.startswith("2031-06-04")
    sparse = frame[~day | (np.arange(len(frame)) % 10 == 0)].reset_index(drop=True)
    with caplog.at_level(logging.WARNING, logger="smle.data"):
        table = prepare_daily(sparse, "5min", repair="drop")
    assert "2031-06-04" not in table.index.strftime("%Y-%m-%d")
    assert len(table) == 2
    (repair,) = table.attrs["repairs"]
    assert repair.action == "dropped day" and repair.label == "date 2031-06-04"
    assert repair.position == 780
    assert "dropped day" in caplog.text


def test_too_short_series():
    message = _raises(read_daily, _daily_bars(1).drop(columns=["open", "high", "low"]))
    assert "daily prices: 1 usable, at least 2 needed" in message
    assert "the series is too short" in message
    message = _raises(prepare_daily, _minute_prices(days=1))
    assert "session days: 1 usable, at least 2 needed" in message


def test_repaired_rows_are_logged_and_recorded(caplog):
    frame = _daily_bars(8)
    frame.loc[2, "high"] = 90.0  # below the low
    frame.loc[5, "close"] = -1.0
    with caplog.at_level(logging.WARNING, logger="smle.data"):
        bars = read_ohlc(frame, repair="drop")
    assert len(bars) == 6
    rules = {repair.position: repair.rule for repair in bars.attrs["repairs"]}
    assert rules == {5: "prices in column 'close' must be positive",
                     2: "the high must not be below the low"}
    assert caplog.text.count("repair: dropped") == 2


def test_nonexistent_local_time_on_a_clock_change():
    # 01:30 on 2031-03-30 does not exist in Europe/London (clocks go from 01:00 to 02:00).
    frame = pd.DataFrame({"timestamp": ["2031-03-30 00:59:00", "2031-03-30 01:30:00",
                                        "2031-03-30 02:01:00"], "price": [1.0, 1.1, 1.2]})
    message = _raises(read_intraday, frame, timezone="Europe/London")
    assert message.startswith("row 1 (")
    assert "must exist, unambiguously, in Europe/London" in message


@pytest.mark.parametrize("arguments, fragment", [
    ({"repair": "fix"}, "repair='fix' is not accepted"),
    ({"interval": "often"}, "interval='often' is not a duration"),
    ({"interval": "8h"}, "at most the session length (390 min)"),
    ({"session_open": "16:00", "session_close": "09:30"}, "must be later than session_open"),
    ({"session_open": "9.30"}, "session_open='9.30' is not a clock time"),
    ({"measures": ("realised",)}, "unknown names ['realised']"),
    ({"unit": "basis points"}, "unit='basis points' is not accepted"),
    ({"timezone": "Mars/Olympus"}, "not a known time zone"),
])
def test_bad_arguments_name_the_argument(arguments, fragment):
    options = {"interval": "5min", **SESSION, **arguments}
    assert fragment in _raises(prepare_daily, _minute_prices(days=2), **options)
