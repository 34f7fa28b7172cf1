"""The ``smle forecast`` command: predictive distributions of returns and of the variance after
the end of the data, from a saved fit or from a model fitted here.

    smle forecast --from-fit report/result.json --horizon 20 --report fc/
    smle forecast data.csv --model garch:innovations=t --horizon 10 --level 0.01 --report fc/
"""

from __future__ import annotations

from pathlib import Path

_EPILOG = """Either --from-fit (a result.json written by 'smle fit --report'; DATA, if given, replaces the
observations stored in it, e.g. the same series extended by later days) or DATA with --model
(the model is fitted first, as 'smle fit' would).
The report folder (--report) receives forecast.txt, forecast.json, forecast.csv and forecast.png
(and result.json when the model was fitted here).
exit status: 0 done, 3 the fit did not converge (the forecast is still written), 2 bad input."""


def _fitted(args):
    """``(result, y)``: the saved or newly fitted result and the observations to start from."""
    import smle
    from smle.cli.shared import model_from_args, parse_fixed, parse_model_spec, read_observations, read_saved_fit
    from smle.errors import SmleInputError

    if args.from_fit:
        if args.model or args.option or args.fix:
            raise SmleInputError("--from-fit with --model, --option or --fix: the saved fit names its model and "
                                 "estimates; give either --from-fit or a model to fit")
        result = read_saved_fit(args.from_fit, "--from-fit")
        model = smle.get_model(result.model, **result.model_options)
        y = read_observations(args.data, args.column, args.prices, args.drop_missing, model).values \
            if args.data else None
        return result, y
    if not args.data:
        raise SmleInputError("give either --from-fit RESULT.json, or a data file with --model")
    if args.model and ":" in args.model:
        if args.option:
            raise SmleInputError(f"--model {args.model!r} with --option: give the model's options one way")
        model, held = parse_model_spec(args.model)
    else:
        model, held = model_from_args(args.model or "sv", args.option), {}
    observations = read_observations(args.data, args.column, args.prices, args.drop_missing, model)
    fixed = {**held, **parse_fixed(args.fix)}
    result = smle.fit(model, observations.values, n_draws=args.draws, seed=args.seed, verbose=not args.quiet,
                      source=observations.source, dates=observations.dates, fixed=fixed or None)
    print(result.summary())
    print()
    return result, None


def _command_forecast(args) -> int:
    from smle.cli.shared import write_result_files
    from smle.decision.forecast import forecast

    result, y = _fitted(args)
    levels = tuple(args.level) if args.level else (0.01, 0.05)
    outcome = forecast(result, args.horizon, levels=levels, n_paths=args.paths, seed=args.seed, y=y,
                       parameter_draws=args.parameter_draws)
    print(outcome.summary())
    if args.report:
        names = write_result_files(outcome, args.report, "forecast")
        if not args.from_fit:
            result.to_json(Path(args.report) / "result.json")
            names.append("result.json")
        print(f"\nreport written to {args.report}/ ({', '.join(names)})")
    return 0 if result.converged else 3


def add_forecast_command(commands) -> None:
    """Register ``smle forecast`` on the ``smle`` sub-command parser."""
    import argparse

    from smle.cli.shared import FIT_DRAWS, add_column_options, add_fix_option, add_option_flag

    parser = commands.add_parser(
        "forecast", help="predictive distributions of returns and variance after the data (fan chart, VaR, ES)",
        description="Simulates the model forward from the filtered state at the end of the data: per step ahead "
                    "the mean, quantiles, value at risk and expected shortfall of the return, of the cumulative "
                    "return and of the variance.",
        epilog=_EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("data", nargs="?", help="CSV file of the observations (with --model; optional with --from-fit)")
    parser.add_argument("--from-fit", metavar="RESULT.json", help="a fit saved by 'smle fit --report'")
    parser.add_argument("--model", help="model to fit first, NAME[:key=value,...] (default sv; see 'smle models')")
    add_option_flag(parser)
    add_fix_option(parser)
    add_column_options(parser)
    parser.add_argument("--horizon", type=int, default=10, help="steps ahead (default 10)")
    parser.add_argument("--level", type=float, action="append", metavar="P",
                        help="tail probability of the VaR and ES (repeatable; default 0.01 and 0.05)")
    parser.add_argument("--paths", type=int, default=20000, help="simulated paths (default 20000)")
    parser.add_argument("--seed", type=int, default=0, help="seed of the paths (and of the fit's draws) (default 0)")
    parser.add_argument("--parameter-draws", type=int, default=0, metavar="N",
                        help="pool the paths over N parameter vectors drawn from the estimates' asymptotic normal "
                             "law, so that the bands include the parameter error (default 0: estimates as known)")
    parser.add_argument("--draws", type=int, default=FIT_DRAWS,
                        help=f"EIS draws when the fit is simulated (default {FIT_DRAWS})")
    parser.add_argument("--report", help="folder for forecast.txt, forecast.json, forecast.csv and forecast.png")
    parser.add_argument("--quiet", action="store_true", help="no progress output while fitting")
    parser.set_defaults(handler=_command_forecast)
