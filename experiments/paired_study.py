"""Run (or resume) the paired study (EIS against exact maximum likelihood on the same series) and
write its summary.

    python experiments/paired_study.py [--minutes 10] [--workers 2]

The store is experiments/results/paired_study.sqlite (a rerun resumes), the summary folder
experiments/results/paired_summary/, and the report experiments/results/paired_study.md.
"""

from __future__ import annotations

import argparse
import platform
from pathlib import Path

import smle
from smle.study import load_study, run_study, study_status, write_summary

HERE = Path(__file__).resolve().parent


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--minutes", type=float, default=None, help="stop after this much wall time")
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    study = load_study(HERE / "paired_study.toml")
    report = run_study(study, workers=args.workers,
                       stop_after_seconds=None if args.minutes is None else 60 * args.minutes)
    written = write_summary(study.store, study.output, title="sv, T = 1000")
    status = study_status(study.store)
    body = Path(written["markdown"]).read_text().split("\n", 1)[1]
    text = (f"# EIS against exact maximum likelihood on the same series (smle {smle.__version__})\n\n"
            f"Study file: `experiments/paired_study.toml` (master seed {study.master_seed}). Machine: "
            f"{platform.processor() or platform.machine()}, 2 shared cores, pool of {args.workers} workers. "
            f"Stored: {status['ok']} ok, {status['failed']} failed of {status['planned']} planned"
            + (f"; last call {report.completed} replications in {report.elapsed_seconds / 60:.1f} min" if report.completed
               else "") +
            f"; {status['mean_seconds_per_replication']:.1f} s per replication on one worker (EIS fits include "
            "their exact reference fit).\n" + body)
    (HERE / "results" / "paired_study.md").write_text(text)
    print(text)


if __name__ == "__main__":
    main()
