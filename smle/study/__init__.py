"""Monte Carlo studies of smle's estimators: bias, RMSE and interval coverage over designs.

    study = smle.study.load_study("study.toml")            # or Study(...) in Python
    smle.study.run_study(study)                            # resumes if the store exists
    smle.study.run_study(study, scheduler="tcp://host:8786")   # the same numbers on a cluster
    print(smle.study.format_status(smle.study.study_status(study.store)))
    smle.study.write_summary(study.store, "results/")      # CSV, Markdown, figures

Each replication's data and random numbers come from (master seed, design name, replication)
alone (:func:`replication_seeds`); results go to an SQLite store (:mod:`smle.study.store`)
one committed row at a time.
"""

from smle.study.replication import run_replication
from smle.study.runner import RunReport, pending_replications, run_study
from smle.study.spec import Design, Estimator, Study, check_study, load_study, replication_seeds, study_from_mapping
from smle.study.store import SCHEMA_VERSION, check_compatible
from smle.study.summary import (export_csv, format_status, markdown_tables, parameter_statistics, read_results,
                                study_status, summarize, write_summary)

__all__ = [
    "Design", "Estimator", "RunReport", "SCHEMA_VERSION", "Study", "check_compatible", "check_study", "export_csv",
    "format_status", "load_study", "markdown_tables", "parameter_statistics", "pending_replications", "read_results",
    "replication_seeds", "run_replication", "run_study", "study_from_mapping", "study_status", "summarize",
    "write_summary",
]
