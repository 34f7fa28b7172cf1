"""``smle study ...``: run, inspect, summarise and export Monte Carlo studies.

    smle study run study.toml [--backend pool|inprocess|dask] [--workers N] [--scheduler ADDR]
    smle study status study.toml|store.sqlite
    smle study summary study.toml|store.sqlite [--output DIR] [--no-figures]
    smle study export study.toml|store.sqlite [--output FILE.csv]
    smle study example PATH.toml          # a commented study file to start from

``smle study --help`` describes the study file format (:func:`smle.study.spec.format_text`).

:func:`add_study_commands` adds the ``study`` command to an argparse subparsers object; each
leaf sets ``handler(args) -> exit code``.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from smle.errors import SmleInputError


def _store_of(target: str, store: str | None = None) -> tuple[Path, object]:
    """The store path (and the study, if ``target`` is a study file) for a command's argument."""
    from smle.study.spec import load_study

    path = Path(target)
    if path.suffix.lower() == ".toml":
        study = load_study(path)
        chosen = store or study.store
        if chosen is None:
            raise SmleInputError(f"study file {target!r} names no [outputs] store; give --store")
        return Path(chosen), study
    if store is not None:
        raise SmleInputError("--store is only accepted with a study file (.toml)")
    if not path.exists():
        raise SmleInputError(f"{target!r} does not exist; accepted: a study file (.toml) or a study store")
    return path, None


def _command_run(args) -> int:
    from smle.study.runner import run_study

    _, study = _store_of(args.study, args.store)
    if study is None:
        raise SmleInputError(f"study run needs a study file (.toml), not {args.study!r}")
    backend = "dask" if args.local_cluster else args.backend
    report = run_study(study, store=args.store, backend=backend, workers=args.workers, scheduler=args.scheduler,
                       retry_failed=args.retry_failed, batch_size=args.batch_size, progress=not args.quiet,
                       allow_new_version=args.allow_new_version, max_replications=args.max_replications)
    print(f"{report.completed} replications completed, {report.failed} failed, {report.skipped} already stored, "
          f"{report.remaining} missing; {report.elapsed_seconds:.1f} s on {report.backend}; store {report.store}")
    return 0 if report.failed == 0 else 3


def _command_status(args) -> int:
    from smle.study.summary import format_status, study_status

    path, _ = _store_of(args.study, args.store)
    print(format_status(study_status(path)))
    return 0


def _command_summary(args) -> int:
    from smle.study.summary import write_summary

    path, study = _store_of(args.study, args.store)
    folder = args.output or (study.output if study is not None and study.output else path.parent / f"{path.stem}-summary")
    written = write_summary(path, folder, figures=not args.no_figures, converged_only=args.converged_only)
    print(Path(written["markdown"]).read_text())
    print("written: " + ", ".join(str(p) for p in written.values()), file=sys.stderr)
    return 0


def _command_export(args) -> int:
    from smle.study.summary import export_csv

    path, _ = _store_of(args.study, args.store)
    output = args.output or path.with_suffix(".csv")
    table = export_csv(path, output)
    print(f"{len(table)} replications written to {output}")
    return 0


def _command_example(args) -> int:
    from smle.study.example import write_example

    path = write_example(args.path)
    print(f"example study written to {path}; try: smle study run {path} --max-replications 3")
    return 0


_FORMAT = "<the study file format>"


class _StudyHelp(argparse.RawDescriptionHelpFormatter):
    """Writes the study file format (:func:`smle.study.spec.format_text`) in place of ``_FORMAT``,
    reading it only when the help is shown (it imports numpy, which ``smle --help`` need not)."""

    def add_text(self, text):
        if text == _FORMAT:
            from smle.study.spec import format_text

            text = format_text()
        super().add_text(text)


def add_study_commands(subparsers) -> None:
    """Add ``study run|status|summary|export|example`` to an argparse subparsers object."""
    study = subparsers.add_parser("study", help="Monte Carlo studies: run, status, summary, export, example",
                                  description="Monte Carlo studies of smle's estimators from a study file (TOML).",
                                  epilog=_FORMAT, formatter_class=_StudyHelp)
    commands = study.add_subparsers(dest="study_command", required=True)

    run = commands.add_parser("run", help="run or resume a study file (TOML)")
    run.add_argument("study", help="study file (.toml)")
    run.add_argument("--store", help="SQLite store (default: [outputs] store of the file)")
    run.add_argument("--backend", default="pool", choices=["pool", "inprocess", "dask"],
                     help="where replications run (default pool: local spawned processes)")
    run.add_argument("--workers", type=int, help="pool or LocalCluster size (default: cores; 2 for a LocalCluster)")
    run.add_argument("--scheduler", help="address of a running Dask scheduler, e.g. tcp://host:8786")
    run.add_argument("--local-cluster", action="store_true", help="run on a new Dask LocalCluster")
    run.add_argument("--retry-failed", action="store_true", help="run again the replications stored as failed")
    run.add_argument("--batch-size", type=int, default=1, help="replications per task (default 1)")
    run.add_argument("--max-replications", type=int, help="stop after this many (default: all)")
    run.add_argument("--allow-new-version", action="store_true",
                     help="continue a store written by another smle version")
    run.add_argument("--quiet", action="store_true", help="no progress output")
    run.set_defaults(handler=_command_run)

    for name, text in (("status", "where a running or stopped study stands"),
                       ("summary", "bias, RMSE, coverage... with Monte Carlo standard errors: CSV, Markdown, figures"),
                       ("export", "every stored replication as one CSV row")):
        p = commands.add_parser(name, help=text)
        p.add_argument("study", help="study file (.toml) or study store (.sqlite)")
        p.add_argument("--store", help="store path, overriding the study file's")
        if name == "summary":
            p.add_argument("--output", help="folder for summary.csv, summary.md and figures "
                                            "(default: [outputs] folder, else beside the store)")
            p.add_argument("--no-figures", action="store_true", help="tables only")
            p.add_argument("--converged-only", action="store_true", help="only replications whose fit converged")
        if name == "export":
            p.add_argument("--output", help="CSV file (default: the store's name with .csv)")
        p.set_defaults(handler={"status": _command_status, "summary": _command_summary, "export": _command_export}[name])

    example = commands.add_parser("example", help="write a commented example study file (TOML) to start from")
    example.add_argument("path", help="new file to write (.toml); an existing file is not overwritten")
    example.set_defaults(handler=_command_example)
