"""The tables of a study store as data frames (read by the summaries and the figures)."""

from __future__ import annotations

import json
import math

import pandas as pd

from smle.study import store as store_module


def read_results(store) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """``(designs, replications, estimates)`` tables of a store, in study order."""
    connection = store_module.open_read_only(store)
    try:
        designs = pd.read_sql_query("SELECT name, position, replications, definition FROM designs ORDER BY position",
                                    connection)
        replications = pd.read_sql_query(
            "SELECT r.* FROM replications r JOIN designs d ON d.name = r.design ORDER BY d.position, r.replication",
            connection)
        estimates = pd.read_sql_query(
            "SELECT e.* FROM estimates e JOIN designs d ON d.name = e.design ORDER BY d.position, e.replication, e.rowid",
            connection)
    finally:
        connection.close()
    designs["definition"] = designs["definition"].map(json.loads)
    designs["n_periods"] = designs["definition"].map(lambda d: d["n_periods"])
    designs["model"] = designs["definition"].map(lambda d: d["model"])
    return designs, replications, estimates


def value_text(value, mcse=None, digits=4) -> str:
    """A table cell: "value ± MCSE" (the MCSE left out when not finite; "–" for a missing value)."""
    if value is None or not math.isfinite(value):
        return "–"
    text = f"{value:.{digits}g}"
    return text + (f" ± {mcse:.2g}" if mcse is not None and math.isfinite(mcse) else "")
