"""The daily table: columns and units, the overnight split, whole-day measures, files, and
the invented demo scenario (smle's own; DEMO DATA ONLY, not real data)."""

import hashlib

import numpy as np
import pandas as pd
import pytest

from smle.data import (demo_scenario, prepare_daily, prepare_file, prepare_from_daily,
                       read_daily_table, read_intraday, write_daily)
from smle.data.demo import DISCLAIMER

VENUE = {"timezone": "Europe/London", "session_open": "09:00", "session_close": "15:30"}


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    return demo_scenario(seed=3, n_days=40, folder=tmp_path_factory.mktemp("demo"))


def test_demo_is_deterministic_and_labelled(scenario, tmp_path):
    again = demo_scenario(seed=3, n_days=40, folder=tmp_path)
    for name in ("intraday", "daily"):
        digest = [hashlib.sha256(files[name].read_bytes()).hexdigest()
                  for files in (scenario.files, again.files)]
        assert digest[0] == digest[1]
    pd.testing.assert_frame_equal(scenario.truth, again.truth)
    other = demo_scenario(seed=4, n_days=40)
    assert not np.allclose(other.intraday["close"], scenario.intraday["close"])
    about = scenario.files["about"].read_text()
    assert "DEMO DATA ONLY" in about and "not real data" in about
    assert scenario.settings["disclaimer"] == DISCLAIMER
    assert len(scenario.intraday) == 40 * 390


def test_table_columns_units_and_overnight_split(scenario):
    table = prepare_daily(scenario.files["intraday"], "5min", **VENUE)
    assert table.index.name == "date" and len(table) == 39
    assert table.columns.tolist() == [
        "return_pct", "overnight_return_pct", "session_return_pct", "realized_variance_pct2",
        "bipower_variation_pct2", "subsampled_realized_variance_pct2", "parkinson_pct2",
        "garman_klass_pct2", "rogers_satchell_pct2", "n_observations"]
    assert table.attrs["variance_unit"] == "percent squared"
    assert table.attrs["interval"] == "5min" and table.attrs["timezone"] == "Europe/London"
    assert not table.isna().any().any()
    # Log returns add up: previous close -> open -> close.
    np.testing.assert_allclose(table["overnight_return_pct"] + table["session_return_pct"],
                               table["return_pct"], atol=1e-12)
    # The close-to-close return equals the one from the demo's daily bars.
    daily = prepare_from_daily(scenario.files["daily"])
    np.testing.assert_allclose(table["return_pct"], daily["return_pct"], atol=1e-9)
    np.testing.assert_allclose(table["overnight_return_pct"], daily["overnight_return_pct"],
                               atol=1e-9)


def test_realized_variance_tracks_the_latent_variance(scenario):
    # The demo's true session variance is known; 1-minute RV is unbiased for it (error sd
    # about sqrt(2 * 1.09 / 390) = 7 % a day), so the 39-day mean ratio is 1 within 4 % and
    # the log-correlation across days is high.
    table = prepare_daily(scenario.intraday, "1min", **VENUE)
    truth = scenario.truth["session_integrated_variance_pct2"].iloc[1:].to_numpy()
    ratio = table["realized_variance_pct2"].to_numpy() / truth
    assert abs(ratio.mean() - 1.0) < 0.04, ratio.mean()
    assert np.corrcoef(np.log(table["realized_variance_pct2"]), np.log(truth))[0, 1] > 0.9


def test_whole_day_measures_add_the_squared_overnight_return(scenario):
    session = prepare_daily(scenario.intraday, "5min", **VENUE)
    whole = prepare_daily(scenario.intraday, "5min", add_overnight=True, **VENUE)
    assert "realized_variance_whole_day_pct2" in whole.columns
    assert "realized_variance_pct2" not in whole.columns
    np.testing.assert_allclose(
        whole["realized_variance_whole_day_pct2"],
        session["realized_variance_pct2"] + session["overnight_return_pct"] ** 2)
    assert whole.attrs["overnight_included"] is True


def test_decimal_unit_and_chosen_measures(scenario):
    table = prepare_daily(scenario.intraday, "5min", unit="decimal",
                          measures=("realized_variance", "parkinson"), **VENUE)
    percent = prepare_daily(scenario.intraday, "5min", **VENUE)
    assert table.columns.tolist() == ["return_dec", "overnight_return_dec",
                                      "session_return_dec", "realized_variance_dec2",
                                      "parkinson_dec2", "n_observations"]
    np.testing.assert_allclose(table["realized_variance_dec2"] * 1e4,
                               percent["realized_variance_pct2"])


def test_rows_outside_the_session_are_counted_and_logged(scenario, caplog):
    # With a 09:30-16:00 session the demo's 09:01-09:30 bars (29 a day) fall outside.
    table = prepare_daily(scenario.intraday, "5min", timezone="Europe/London",
                          session_open="09:30", session_close="16:00")
    assert table.attrs["n_outside_session"] == 40 * 29
    assert table.attrs["outside_session"] == {"before_open": 40 * 29, "after_close": 0}
    assert "fall outside the session 09:30-16:00" in caplog.text
    assert any("1160 of 15600 intraday rows (7.4%)" in note for note in table.attrs["notes"])


def test_default_session_is_the_datas_own(scenario):
    # The demo's session is 09:00-15:30 London time (demo.SESSION_OPEN/CLOSE). By default the
    # session is inferred from the data, nothing is dropped, and the table is the one with
    # the venue's session and zone given.
    for source in (scenario.intraday, scenario.files["intraday"]):
        table = prepare_daily(source, "5min")
        assert table.attrs["session"] == "09:00-15:30"
        assert table.attrs["n_outside_session"] == 0
        pd.testing.assert_frame_equal(
            table, prepare_daily(scenario.intraday, "5min", **VENUE), check_freq=False)


def test_default_session_follows_the_written_clock_across_a_clock_change(tmp_path):
    # 70 business days from 2031-01-06 cross the change to summer time (2031-03-30): the file
    # carries +00:00 and then +01:00. Read in UTC, summer sessions would start at 08:00 and
    # lose an hour; read as written, every row is inside 09:00-15:30.
    scenario = demo_scenario(seed=5, n_days=70, folder=tmp_path)
    scenario_start = scenario.intraday.index[0]
    assert str(scenario_start.tz) == "Europe/London"
    text = scenario.files["intraday"].read_text()
    assert "+00:00" in text and "+01:00" in text
    table = prepare_daily(scenario.files["intraday"], "5min")
    assert table.attrs["session"] == "09:00-15:30"
    assert table.attrs["n_outside_session"] == 0
    assert len(table) == 69
    # The same through a frame read first: the written clock travels with it.
    again = prepare_daily(read_intraday(scenario.files["intraday"]), "5min")
    pd.testing.assert_frame_equal(again, table, check_freq=False)
    reference = prepare_daily(scenario.intraday, "5min", **VENUE)
    np.testing.assert_allclose(table["realized_variance_pct2"],
                               reference["realized_variance_pct2"], rtol=1e-12)


def test_write_and_read_back(scenario, tmp_path):
    table = prepare_daily(scenario.intraday, "5min", **VENUE)
    path = write_daily(table, tmp_path / "daily.csv")
    back = read_daily_table(path)
    pd.testing.assert_frame_equal(back, table, check_freq=False, rtol=1e-9)
    assert back.attrs["interval"] == "5min" and back.attrs["repairs"] == []
    assert (tmp_path / "daily.csv.meta.json").exists()


def test_prepare_file_does_the_whole_job(scenario, tmp_path):
    output = tmp_path / "out.csv"
    table = prepare_file(scenario.files["intraday"], output, interval="10min", **VENUE)
    assert table.attrs["output_path"] == str(output)
    assert read_daily_table(output).shape == table.shape
    daily = prepare_file(scenario.files["daily"], tmp_path / "d.csv")
    assert daily.attrs["input_kind"] == "daily bars"
    assert "parkinson_pct2" in daily.columns


def test_sampling_uses_the_previous_price():
    # Prices at 09:30, 09:32 and 09:37 on a 5-minute grid: the 09:35 point takes 09:32's
    # price, 09:40 (the close) takes 09:37's.
    rows = []
    for day, prices in (("2031-01-02", [100.0, 101.0, 103.0]),
                        ("2031-01-03", [104.0, 102.0, 108.0])):
        for minute, price in zip((0, 2, 7), prices):
            rows.append({"timestamp": pd.Timestamp(f"{day} 09:30") + pd.Timedelta(minutes=minute),
                         "price": price})
    table = prepare_daily(pd.DataFrame(rows), "5min", session_open="09:30",
                          session_close="09:40", min_observations=2)
    expected = 1e4 * (np.log(102 / 104) ** 2 + np.log(108 / 102) ** 2)
    assert table["realized_variance_pct2"].iloc[0] == pytest.approx(expected, rel=1e-12)
    assert table["overnight_return_pct"].iloc[0] == pytest.approx(100 * np.log(104 / 103))
