"""The ``smle`` command line.

    smle fit --model sv data.csv      estimate a model on a column of returns or prices
    smle fit --model realized-sv daily.csv --column ret --column rv   two observed series
    smle fit --model garch-mix --option link=lognormal data.csv        a model option
    smle models                       list the registered models, their parameters and options
    smle demo                         fit the invented demo scenario end to end
    smle prepare intraday.csv         prices to the aligned daily table of returns and measures
    smle check data.csv --params ...  health check of the simulated likelihood (smle/cli/check.py)
    smle diagnose result.json         goodness of fit of a saved fit: PITs, residual tests, figures
    smle compare data.csv --model ... fit several models to the same data: one table, LR tests (cli/compare.py)
    smle forecast --from-fit r.json   predictive distributions after the data: VaR, ES, fan chart (cli/forecast.py)
    smle backtest data.csv --window N rolling one-step forecasts: VaR coverage tests, log scores (cli/backtest.py)
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path


from smle.cli.shared import (FIT_DRAWS, add_column_options, add_fix_option, add_option_flag, check_report_folder,
                             describe_options, model_from_args, parse_fixed, parse_model_spec, read_observations,
                             read_saved_fit, say)
from smle.errors import SmleInputError
from smle.cli.backtest import add_backtest_command  # these two modules import nothing heavy at the top
from smle.cli.forecast import add_forecast_command


def _write_report(result, y, folder: Path, label: str, args=None) -> list[str]:
    """Results JSON, two figures and the goodness-of-fit report into ``folder``; the file names."""
    from smle.diagnostics import plots

    folder.mkdir(parents=True, exist_ok=True)
    result.to_json(folder / "result.json")
    (folder / "summary.txt").write_text(result.summary() + "\n")
    plots.data_and_factor(result, y, label, folder / "factor.png")
    names = ["result.json", "summary.txt", "factor.png"]
    if result.closed_form:  # no latent state to filter
        return names
    if result.simulated:  # an exact fit has no draws
        plots.log_weights(result, folder / "log_weights.png")
        names.append("log_weights.png")
    if args is not None and getattr(args, "particles", 0):
        diagnostics = _diagnose(result, y, args)
        names += [path.name for path in diagnostics.write(folder)]
    return names


def _diagnose(result, y, args):
    import smle

    progress = None if args.quiet else (lambda message: print(message, file=sys.stderr, flush=True))
    diagnostics = smle.diagnose(result, y, n_particles=args.particles, seed=args.seed, progress=progress,
                                method=getattr(args, "filter_method", "auto"))
    print()
    print(diagnostics.summary())
    return diagnostics


def _model_and_held(args):
    """The model of ``--model`` (``NAME`` with ``--option`` items, or ``NAME:key=value,...``) and the
    parameters its spec holds fixed."""
    if ":" in args.model:
        if args.option:
            raise SmleInputError(f"--model {args.model!r} with --option: give the model's options one way, "
                                 "either in the spec (NAME:key=value) or as --option NAME=VALUE")
        return parse_model_spec(args.model)
    return model_from_args(args.model, args.option), {}


def _fit_and_report(model, observations, args, held=None) -> int:
    import smle

    fixed = parse_fixed(getattr(args, "fix", None))
    unknown = [name for name in fixed if name not in model.param_names]
    if unknown:
        raise SmleInputError(f"--fix {unknown[0]}: model '{model.name}' has no parameter {unknown[0]!r}; its "
                             f"parameters are: {', '.join(model.param_names)}")
    result = smle.fit(model, observations.values, n_draws=args.draws, seed=args.seed, n_seeds=args.seeds,
                      verbose=not args.quiet, control_variates=args.control_variates, max_steps=args.max_steps,
                      source=observations.source, dates=observations.dates, fixed={**(held or {}), **fixed} or None,
                      method=args.method)
    print(result.summary())
    if args.report:
        folder = Path(args.report)
        names = _write_report(result, observations.values, folder, observations.label, args)
        print(f"\nreport written to {folder}/ ({', '.join(names)})")
    return 0 if result.converged else 3


def _command_fit(args) -> int:
    model, held = _model_and_held(args)
    observations = read_observations(args.data, args.column, args.prices, args.drop_missing, model)
    return _fit_and_report(model, observations, args, held)


def _command_diagnose(args) -> int:
    import smle

    result = read_saved_fit(args.result, "result file")
    y = None
    if args.data:
        model = smle.get_model(result.model, **result.model_options)
        y = read_observations(args.data, args.column, args.prices, args.drop_missing, model).values
    elif result.observations is None:
        raise SmleInputError(f"{args.result!r} stores no observations; give the data with --data")
    diagnostics = _diagnose(result, y, args)
    if args.report:
        names = [path.name for path in diagnostics.write(args.report)]
        print(f"\ndiagnostics written to {args.report}/ ({', '.join(names)})")
    return 0


def _command_models(args) -> int:
    import smle

    for name in smle.model_names():
        model = smle.get_model(name)
        print(model.describe())
        print(f"    equations: {model.equations}")
        series = ", ".join(model.series_labels[:model.n_series])
        print(f"    observed series (one --column each, in this order): {series}")
        for line in describe_options(type(model)):
            print(f"    {line}")
        print()
    return 0


def _command_demo(args) -> int:
    from smle.cli.observations import Observations, unit_of
    from smle.data import demo_scenario, prepare_from_daily

    model, held = _model_and_held(args)
    if args.days < model.min_periods + 1:  # one return per day after the first
        raise SmleInputError(f"--days {args.days} is not accepted; accepted: a whole number of days >= "
                             f"{model.min_periods + 1} (model '{model.name}' needs {model.min_periods} daily returns "
                             "and the first day gives none); the default is 750")
    folder = Path(args.report or tempfile.mkdtemp(prefix="smle-demo-"))
    scenario = demo_scenario(seed=args.seed, n_days=args.days, folder=folder / "data")
    daily = prepare_from_daily(scenario.daily)
    y = daily["return_pct"].to_numpy()
    settings = scenario.settings
    print(f"demo scenario (invented, simulated data): {settings['instrument']} on {settings['venue']}, "
          f"{len(y)} daily returns in percent; files in {folder / 'data'}")
    args.report = str(folder / "report")
    source = {"file": str(scenario.files["daily"]), "columns": ["return_pct"], "units": [unit_of("return_pct")],
              "prices": True}
    observations = Observations(y, list(daily.index.strftime("%Y-%m-%d")), "daily return (percent, demo data)",
                                source)
    status = _fit_and_report(model, observations, args, held)
    if model.state_dim == 1 and args.method != "eis":
        _demo_simulated_against_exact(model, observations, args, held)
    return status


def _demo_simulated_against_exact(model, observations, args, held) -> None:
    """The demo's second part: the same model by EIS, its fit and its health check measured
    against the exact likelihood just computed."""
    import smle

    print("\n--- the same model by simulated maximum likelihood (EIS), measured against the exact fit ---\n")
    simulated = smle.fit(model, observations.values, n_draws=args.draws, seed=args.seed, verbose=not args.quiet,
                         max_steps=args.max_steps, fixed=held or None, method="eis", source=observations.source,
                         dates=observations.dates)
    print(simulated.summary())
    folder = Path(args.report) / "eis"
    folder.mkdir(parents=True, exist_ok=True)
    simulated.to_json(folder / "result.json")
    (folder / "summary.txt").write_text(simulated.summary() + "\n")
    report = smle.check(model, simulated.params, observations.values, n_draws=args.draws, n_seeds=5, seed=args.seed,
                        tail_draws=500, draws_grid=None, dates=observations.dates)
    print()
    print(report.summary())
    written = report.write(folder / "check")
    print(f"\nEIS fit and its check written to {folder}/ (result.json, summary.txt, check/: {len(written)} files)")


def _command_prepare(args) -> int:
    from smle.data import prepare_file

    options = {name: getattr(args, name) for name in ("session_open", "session_close", "timezone", "price_column")
               if getattr(args, name)}
    if args.drop_bad_rows:
        options["repair"] = "drop"
    table = prepare_file(args.data, args.output, interval=args.interval, kind=args.kind, **options)
    print(table.head().to_string())
    for repair in table.attrs.get("repairs", []):
        say(f"{repair.action} {repair.label}: {repair.rule} ({repair.detail})")
    for note in table.attrs.get("notes", []):
        say(f"note: {note}")
    print(f"... {len(table)} daily rows written to {table.attrs['output_path']}; fit them with "
          f"'smle fit {table.attrs['output_path']}' (the return column is found by itself)")
    return 0


def _estimation_options(p, default_model="sv"):
    """The options of every command that fits a model (fit, demo)."""
    p.add_argument("--model", default=default_model,
                   help=f"registered model name (default {default_model}; see 'smle models'), with options and "
                        "held parameters as NAME:key=value,... e.g. garch:innovations=t,ar1=0")
    add_fix_option(p)
    p.add_argument("--method", choices=["auto", "exact", "eis"], default="auto",
                   help="likelihood: exact (grid or Kalman filter, one-dimensional states), eis (simulated), or "
                        "auto (default: exact where the state is one-dimensional, eis otherwise)")
    p.add_argument("--draws", type=int, default=FIT_DRAWS, help=f"EIS draws per set (default {FIT_DRAWS})")
    p.add_argument("--seed", type=int, default=0, help="seed of the common random numbers (default 0)")
    p.add_argument("--seeds", type=int, default=1, help="independent refits for simulation standard errors (default 1)")
    p.add_argument("--quiet", action="store_true", help="no progress output")
    p.add_argument("--control-variates", choices=["independent", "draws", "both"], default=None,
                   help="maximise the control-variate corrected likelihood (default: none)")
    p.add_argument("--particles", type=int, default=2000,
                   help="particles of the goodness-of-fit filter written with --report (default 2000; 0: none)")
    p.add_argument("--max-steps", type=int, default=200, help="cap on optimiser (L-BFGS) steps (default 200)")
    add_option_flag(p)


def _add_prepare_command(commands) -> None:
    """Register ``smle prepare``."""
    prepare = commands.add_parser("prepare", help="prices (intraday or daily bars) to a daily table of returns and measures")
    prepare.add_argument("data", help="CSV (or Parquet) file of intraday prices/bars, daily bars or closes")
    prepare.add_argument("--output", help="CSV to write (default: <input>_daily.csv)")
    prepare.add_argument("--interval", default="5min", help="sampling interval of realized measures (default 5min)")
    prepare.add_argument("--kind", default="auto", choices=["auto", "intraday", "daily"], help="input kind (default: detect)")
    prepare.add_argument("--price-column", help="the column of prices (default: found by name, e.g. price or close)")
    prepare.add_argument("--session-open", help="session open, venue time HH:MM (default: inferred from the data, "
                                                "the usual time of each day's first row)")
    prepare.add_argument("--session-close", help="session close, venue time HH:MM (default: inferred from the data, "
                                                 "the usual time of each day's last row)")
    prepare.add_argument("--timezone", help="venue time zone, e.g. Europe/Paris (default: the clock as written in "
                                            "the data; UTC where no offset is given)")
    prepare.add_argument("--drop-bad-rows", action="store_true", help="drop bad rows (logged) instead of failing")
    prepare.set_defaults(handler=_command_prepare)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="smle",
        description="Maximum likelihood for latent-factor volatility models: exact filtering for one-dimensional states, "
                    "simulated (efficient importance sampling) for several dimensions.",
    )
    commands = parser.add_subparsers(dest="command", required=True)

    fit = commands.add_parser("fit", help="estimate a model on a file's column(s) of returns or prices")
    fit.add_argument("data", help="CSV (or Parquet) file; a table written by 'smle prepare' is understood as is")
    add_column_options(fit)
    fit.add_argument("--report", help="folder for the report (result.json, summary, figures)")
    _estimation_options(fit)
    fit.set_defaults(handler=_command_fit)

    models = commands.add_parser("models", help="list the registered models and their parameters")
    models.set_defaults(handler=_command_models)

    demo = commands.add_parser("demo", help="fit the invented demo scenario (simulated data) end to end")
    demo.add_argument("--days", type=int, default=750, help="days of demo data (default 750)")
    demo.add_argument("--report", help="folder for the demo data and report (default: a new temporary folder)")
    _estimation_options(demo)
    demo.set_defaults(handler=_command_demo)

    _add_prepare_command(commands)

    diagnose = commands.add_parser("diagnose", help="goodness of fit of a saved fit (PITs, residual tests, figures)")
    diagnose.add_argument("result", help="result.json written by 'smle fit --report' (or FitResult.to_json)")
    diagnose.add_argument("--data", help="CSV of the observations (default: those stored in the result)")
    add_column_options(diagnose, "of --data ")
    diagnose.add_argument("--method", dest="filter_method", choices=("auto", "exact", "particles"), default="auto",
                          help="how to filter: 'exact' (no simulation; one-dimensional states), 'particles' (the "
                               "particle filter and an EIS-drawn factor path); default 'auto': the fit's own route")
    diagnose.add_argument("--particles", type=int, default=2000,
                          help="particles of the particle filter (default 2000)")
    diagnose.add_argument("--seed", type=int, default=0, help="seed of the particle filter and the factor path (default 0)")
    diagnose.add_argument("--report", help="folder for diagnostics.txt, diagnostics.json and the figures")
    diagnose.add_argument("--quiet", action="store_true", help="no progress output")
    diagnose.set_defaults(handler=_command_diagnose)

    from smle.cli.study import add_study_commands

    add_study_commands(commands)
    from smle.cli.check import add_check_command

    add_check_command(commands)
    from smle.cli.compare import add_compare_command

    add_compare_command(commands)
    add_forecast_command(commands)
    add_backtest_command(commands)
    return parser


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        if getattr(args, "report", None):
            check_report_folder(args.report)
        return args.handler(args)
    except SmleInputError as error:
        print(f"smle: error: {error}", file=sys.stderr)
        return 2

