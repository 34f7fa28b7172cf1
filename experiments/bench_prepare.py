"""Benchmark: one year of 1-minute bars (252 days x 390 bars = 98,280 rows) into daily measures.

Target: under 2 s. The data are the invented demo scenario (smle.data.demo; DEMO DATA ONLY,
not real data), written to a temporary CSV. We time, best and median of several runs:
  * from_csv: prepare_daily on the CSV path (reading, parsing time zones, all checks and all
    six measures at 5 minutes with 5 subsamples);
  * from_frame: the same from the frame already in memory;
  * prepare_file: the whole `smle prepare` job (also detects the kind and writes the table).
Results go to experiments/results/bench_prepare.json with the machine described.

Run: python experiments/bench_prepare.py
"""

from __future__ import annotations

import json
import os
import platform
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from smle.data import demo_scenario, prepare_daily, prepare_file

from machine import cpu_model  # experiments/machine.py

REPEATS = 7
VENUE = {"timezone": "Europe/London", "session_open": "09:00", "session_close": "15:30"}




def _time(function, repeats=REPEATS):
    seconds = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        seconds.append(time.perf_counter() - start)
    return {"best_s": round(min(seconds), 4), "median_s": round(statistics.median(seconds), 4),
            "runs": repeats}


def main() -> dict:
    with tempfile.TemporaryDirectory() as folder:
        scenario = demo_scenario(seed=2031, n_days=252, folder=folder)
        path = scenario.files["intraday"]
        rows = len(scenario.intraday)
        prepare_daily(path, "5min", **VENUE)  # warm up (imports, first-call costs)
        timings = {
            "from_csv": _time(lambda: prepare_daily(path, "5min", **VENUE)),
            "from_frame": _time(lambda: prepare_daily(scenario.intraday, "5min", **VENUE)),
            "prepare_file": _time(lambda: prepare_file(path, Path(folder) / "daily.csv",
                                                       interval="5min", **VENUE)),
        }
        table = prepare_daily(path, "5min", **VENUE)
    result = {
        "benchmark": "prepare one year of 1-minute bars into daily measures",
        "rows": rows, "days_out": len(table), "columns_out": list(table.columns),
        "interval": "5min", "subsamples": 5, "target_s": 2.0,
        "timings": timings,
        "meets_target": timings["from_csv"]["median_s"] < 2.0,
        "machine": {"nproc": os.cpu_count(), "cpu_model": cpu_model(),
                    "python": platform.python_version(), "numpy": np.__version__,
                    "pandas": pd.__version__, "platform": platform.platform(),
                    "note": "a shared 2-core machine; other work may have run concurrently"},
        "data": "invented demo scenario (smle.data.demo), DEMO DATA ONLY, not real data",
    }
    out = Path(__file__).resolve().parent / "results" / "bench_prepare.json"
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(result, indent=2) + "\n", encoding="utf-8")
    print(json.dumps(result, indent=2))
    return result


if __name__ == "__main__":
    main()
