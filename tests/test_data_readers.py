"""Property tests of the readers: random gaps, repeated and out-of-order rows.

The rule under test is smle's own (design notes, section 8): bad rows raise an error that
names the row (its 0-based position and its timestamp) and the rule; valid inputs come back
unchanged; repairs happen only on request and are recorded.
"""

import logging

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from smle.data import read_daily, read_intraday, read_ohlc
from smle.errors import SmleInputError

START = pd.Timestamp("2031-02-03 09:30", tz="UTC")


@st.composite
def intraday_frames(draw, min_rows=3, max_rows=40):
    """Strictly increasing timestamps with random gaps (1 s to 2 h) and positive prices."""
    n = draw(st.integers(min_rows, max_rows))
    gaps = draw(st.lists(st.integers(1, 7200), min_size=n, max_size=n))
    prices = draw(st.lists(st.floats(0.01, 1e6, allow_nan=False), min_size=n, max_size=n))
    stamps = START + pd.to_timedelta(np.cumsum(gaps), unit="s")
    return pd.DataFrame({"timestamp": stamps, "price": prices})


PROPERTY = settings(max_examples=40, deadline=None,
                    suppress_health_check=[HealthCheck.function_scoped_fixture])


@PROPERTY
@given(frame=intraday_frames())
def test_valid_input_round_trips_through_csv(frame, tmp_path):
    path = tmp_path / "prices.csv"
    frame.to_csv(path, index=False)
    for source in (frame, path):
        read = read_intraday(source)
        assert (read.index == pd.DatetimeIndex(frame["timestamp"])).all()
        np.testing.assert_array_equal(read["price"].to_numpy(), frame["price"].to_numpy())
        assert read.attrs["repairs"] == []
        assert str(read.index.tz) == "UTC"


@PROPERTY
@given(frame=intraday_frames(), data=st.data())
def test_repeated_timestamp_names_the_row(frame, data):
    k = data.draw(st.integers(1, len(frame) - 1))
    frame.loc[k, "timestamp"] = frame.loc[k - 1, "timestamp"]
    with pytest.raises(SmleInputError) as error:
        read_intraday(frame)
    message = str(error.value)
    assert message.startswith(f"row {k} (")
    assert str(frame.loc[k, "timestamp"]) in message
    assert "each timestamp may appear only once" in message


@PROPERTY
@given(frame=intraday_frames(), data=st.data())
def test_out_of_order_row_is_named(frame, data):
    # Swapping rows k-1 and k makes row k the first that goes backwards in time.
    k = data.draw(st.integers(1, len(frame) - 1))
    before, after = frame.loc[k - 1, "timestamp"], frame.loc[k, "timestamp"]
    frame.loc[k - 1, "timestamp"], frame.loc[k, "timestamp"] = after, before
    with pytest.raises(SmleInputError) as error:
        read_intraday(frame)
    message = str(error.value)
    assert message.startswith(f"row {k} (")
    assert "rows must be sorted by timestamp" in message


@PROPERTY
@given(frame=intraday_frames(), data=st.data())
def test_shuffled_rows_sorted_on_request(frame, data):
    # repair="drop" sorts rows back into place and records each row that was out of order.
    order = data.draw(st.permutations(range(len(frame))))
    shuffled = frame.iloc[list(order)].reset_index(drop=True)
    read = read_intraday(shuffled, repair="drop")
    assert (read.index == pd.DatetimeIndex(frame["timestamp"])).all()
    np.testing.assert_array_equal(read["price"].to_numpy(), frame["price"].to_numpy())
    backwards = int(np.sum(np.diff(np.asarray(order)) < 0))
    if backwards == len(frame) - 1:
        # Newest first throughout: reversed, with a note instead of a repair per row.
        backwards = 0
        assert any("newest-first" in note for note in read.attrs["notes"])
    assert len(read.attrs["repairs"]) == backwards
    assert all(repair.action == "sorted" for repair in read.attrs["repairs"])


@PROPERTY
@given(frame=intraday_frames(), data=st.data())
def test_missing_or_bad_price_names_the_row(frame, data):
    k = data.draw(st.integers(0, len(frame) - 1))
    bad = data.draw(st.sampled_from([np.nan, 0.0, -1.5]))
    frame.loc[k, "price"] = bad
    with pytest.raises(SmleInputError) as error:
        read_intraday(frame)
    message = str(error.value)
    assert message.startswith(f"row {k} (")
    rule = "must hold a number" if np.isnan(bad) else "must be positive"
    assert rule in message


@PROPERTY
@given(frame=intraday_frames(min_rows=4), data=st.data())
def test_duplicates_dropped_on_request_and_logged(frame, data, caplog):
    ks = sorted(set(data.draw(st.lists(st.integers(1, len(frame) - 1), min_size=1,
                                       max_size=3))))
    for k in ks:
        frame.loc[k, "timestamp"] = frame.loc[k - 1, "timestamp"]
    # Count what must go: every row repeating its predecessor's (possibly repeated) stamp.
    stamps = pd.DatetimeIndex(frame["timestamp"])
    expected = [i for i in range(1, len(frame)) if stamps[i] == stamps[i - 1]]
    caplog.clear()
    with caplog.at_level(logging.WARNING, logger="smle.data"):
        read = read_intraday(frame, repair="drop")
    assert [repair.position for repair in read.attrs["repairs"]] == expected
    assert not read.index.has_duplicates
    assert "each timestamp may appear only once" in caplog.text


@PROPERTY
@given(n=st.integers(3, 30), data=st.data())
def test_daily_duplicate_date_names_the_row(n, data, tmp_path):
    dates = pd.bdate_range("2031-05-01", periods=n)
    frame = pd.DataFrame({"Date": dates.strftime("%Y-%m-%d"),
                          "Close": np.linspace(10, 20, n)})
    k = data.draw(st.integers(1, n - 1))
    frame.loc[k, "Date"] = frame.loc[k - 1, "Date"]
    path = tmp_path / "daily.csv"
    frame.to_csv(path, index=False)
    with pytest.raises(SmleInputError) as error:
        read_daily(path)
    message = str(error.value)
    # Data row k sits on line k + 2 of the file (the header is line 1).
    assert message.startswith(f"row {k} (0-based data row; line {k + 2} of daily.csv;")
    assert "each date may appear only once" in message


def test_column_detection_and_explicit_columns():
    frame = pd.DataFrame({"Trade Time": ["2031-01-02 10:00", "2031-01-02 10:01"],
                          "Last Price": [5.0, 5.1], "Volume": [1, 2]})
    read = read_intraday(frame, timezone="Asia/Tokyo")
    assert read.columns.tolist() == ["price"]
    assert str(read.index[0]) == "2031-01-02 10:00:00+09:00"
    # Naive stamps in another zone, converted to venue time.
    read = read_intraday(frame, timezone="Asia/Tokyo", source_timezone="UTC")
    assert str(read.index[0]) == "2031-01-02 19:00:00+09:00"
    with pytest.raises(SmleInputError, match="price_column='Bid' is not a column"):
        read_intraday(frame, price_column="Bid")
    bars = pd.DataFrame({"when": pd.to_datetime(["2031-01-02", "2031-01-03"]),
                         "O": [1.0, 1.1], "H": [1.2, 1.3], "L": [0.9, 1.0], "C": [1.1, 1.2]})
    read = read_ohlc(bars)
    assert read.columns.tolist() == ["open", "high", "low", "close"]
    assert read.index.name == "date"


def test_bars_stamped_at_start_are_moved_to_their_end():
    stamps = pd.date_range("2031-01-02 09:30", periods=4, freq="1min", tz="UTC")
    bars = pd.DataFrame({"time": stamps, "open": 1.0, "high": 1.2, "low": 0.9, "close": 1.1})
    read = read_intraday(bars, bar_timestamp="start")
    assert read.index[0] == pd.Timestamp("2031-01-02 09:31", tz="UTC")
    assert read.attrs["kind"] == "bars"


def test_parquet_round_trip_when_pyarrow_is_installed(tmp_path):
    pytest.importorskip("pyarrow")
    stamps = pd.date_range("2031-01-02 09:30", periods=5, freq="1min", tz="UTC")
    frame = pd.DataFrame({"timestamp": stamps, "price": [1.0, 1.1, 1.2, 1.1, 1.0]})
    path = tmp_path / "prices.parquet"
    frame.to_parquet(path)
    read = read_intraday(path)
    assert (read.index == stamps).all()
    np.testing.assert_array_equal(read["price"].to_numpy(), frame["price"].to_numpy())
