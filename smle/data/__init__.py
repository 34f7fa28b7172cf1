"""Data in: price files to the aligned daily table a model fit takes.

Readers (:func:`read_daily`, :func:`read_ohlc`, :func:`read_intraday`) check every row and
name the row and the rule of any bad one (:class:`smle.errors.SmleInputError`), or repair
it when asked with ``repair="drop"`` (logged to the ``smle.data`` logger and recorded in
``attrs["repairs"]``); what they inferred without an error (encoding, separator, a reversed
newest-first order, the session, zero returns) is in ``attrs["notes"]``. :func:`prepare_daily` (intraday) and :func:`prepare_from_daily`
(daily bars or closes) build the table; :func:`prepare_file` is the whole ``smle prepare``
job. :func:`demo_scenario` simulates an invented instrument for demonstrations (not real
data). Returns are log returns in percent by default; column names state the unit.
"""

from smle.data.checks import Repair
from smle.data.demo import DemoScenario, demo_scenario
from smle.data.prepare import (DEFAULT_MEASURES, RANGE_MEASURES, REALIZED_MEASURES,
                               prepare_daily, prepare_file, prepare_from_daily,
                               read_daily_table, write_daily)
from smle.data.ranges import garman_klass, parkinson, rogers_satchell
from smle.data.readers import read_daily, read_intraday, read_ohlc
from smle.data.realized import bipower_variation, realized_variance
from smle.data.returns import log_returns

__all__ = [
    "DEFAULT_MEASURES", "RANGE_MEASURES", "REALIZED_MEASURES", "DemoScenario", "Repair",
    "bipower_variation", "demo_scenario", "garman_klass", "log_returns", "parkinson",
    "prepare_daily", "prepare_file", "prepare_from_daily", "read_daily", "read_daily_table",
    "read_intraday", "read_ohlc", "realized_variance", "rogers_satchell", "write_daily",
]
