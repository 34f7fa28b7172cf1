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

import importlib

# public name -> the module that defines it; imported on first use (module __getattr__, PEP 562)
# so that reading a study file (``smle study --help`` included) does not import pandas or JAX
_PUBLIC = {
    "run_replication": "replication",
    **dict.fromkeys(("design_pairs", "paired_differences"), "paired"),
    **dict.fromkeys(("RunReport", "pending_replications", "run_study"), "runner"),
    **dict.fromkeys(("Design", "Estimator", "Study", "check_study", "load_study", "replication_seeds",
                     "study_from_mapping"), "spec"),
    **dict.fromkeys(("SCHEMA_VERSION", "check_compatible"), "store"),
    **dict.fromkeys(("export_csv", "format_status", "markdown_tables", "parameter_statistics", "read_results",
                     "study_status", "summarize", "write_summary"), "summary"),
}


def __getattr__(name):
    if name not in _PUBLIC:
        raise AttributeError(f"module 'smle.study' has no attribute {name!r}")
    value = getattr(importlib.import_module(f"smle.study.{_PUBLIC[name]}"), name)
    globals()[name] = value
    return value


__all__ = sorted(_PUBLIC)
