"""The ``smle backtest`` command: rolling one-step forecasts with re-estimation, VaR coverage tests
and out-of-sample log scores; optionally a second model and a Diebold-Mariano comparison.

    smle backtest data.csv --model garch:ar1=0 --window 500 --refit-every 20 --report bt/
    smle backtest data.csv --model garch --against garch:innovations=t --window 500
    smle backtest data.csv --model garch --window 500 --store bt.sqlite    (run again to resume)
"""

from __future__ import annotations

import sys

_EPILOG = """A model is NAME[:key=value,...] as in 'smle compare' (keys naming a parameter hold it at the
value). Each forecast period t uses the --window periods before it, re-estimated every
--refit-every forecasts (warm-started). Progress goes to stderr.
With --store FILE each block (a re-estimation and its forecasts) is committed to the SQLite file
as it finishes; the same command run again resumes after the last stored block and gives the
numbers of an uninterrupted run. The file refuses a run with other settings or data.
The report folder (--report) receives backtest.txt, backtest.json, backtest.csv and backtest.png
(and the same with the suffix _against for --against).
exit status: 0 done, 3 some fit did not converge, 2 bad input."""


def _run(text, observations, args, fixed, label):
    from smle.cli.shared import parse_model_spec
    from smle.study.backtest_runs import backtest

    model, held = parse_model_spec(text, fixed)
    levels = tuple(args.level) if args.level else (0.01, 0.05)
    progress = None if args.quiet else (lambda message: print(message, file=sys.stderr, flush=True))
    return backtest(model, observations.values, args.window, args.refit_every, levels=levels, n_paths=args.paths,
                    seed=args.seed, fixed=held or None, dates=observations.dates, progress=progress or False,
                    store=args.store, label=label, n_draws=args.draws)


def _command_backtest(args) -> int:
    from smle.cli.shared import parse_fixed, parse_model_spec, read_observations, write_result_files

    fixed = parse_fixed(args.fix)
    model, _ = parse_model_spec(args.model, fixed)
    observations = read_observations(args.data, args.column, args.prices, args.drop_missing, model)
    results = [_run(args.model, observations, args, fixed, "model")]
    print(results[0].summary())
    if args.against:
        results.append(_run(args.against, observations, args, fixed, "against"))
        print()
        print(results[1].summary())
        test = results[0].compare(results[1])
        print(f"\nDiebold-Mariano (1995) test of equal expected log score, {args.model} against {args.against}: "
              f"DM {test.statistic:.3f}, p-value {test.p_value:.4f} (two-sided, {test.lags} Newey-West lags); mean "
              f"difference {test.mean_difference:+.4f} per period (positive favours {args.model})")
    if args.report:
        names = [name for result, stem in zip(results, ("backtest", "backtest_against"))
                 for name in write_result_files(result, args.report, stem)]
        print(f"\nreport written to {args.report}/ ({', '.join(names)})")
    return 0 if all(r["converged"] for result in results for r in result.refits) else 3


def add_backtest_command(commands) -> None:
    """Register ``smle backtest`` on the ``smle`` sub-command parser."""
    import argparse

    from smle.cli.shared import FIT_DRAWS, add_column_options, add_fix_option

    parser = commands.add_parser(
        "backtest", help="rolling one-step forecasts with re-estimation: VaR coverage tests, log scores",
        description="Forecasts each period after the first --window ones from the window before it, "
                    "re-estimating every --refit-every forecasts, and tests the value at risk's hits (Kupiec, "
                    "Christoffersen) and the out-of-sample log scores (Diebold-Mariano with --against).",
        epilog=_EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("data", help="CSV file of the observations")
    parser.add_argument("--model", default="garch", help="model to backtest, NAME[:key=value,...] (default garch)")
    parser.add_argument("--against", metavar="MODEL", help="a second model over the same periods, compared by "
                                                          "the Diebold-Mariano test of the log scores")
    add_fix_option(parser)
    add_column_options(parser)
    parser.add_argument("--window", type=int, required=True, help="periods in each estimation window")
    parser.add_argument("--refit-every", type=int, default=20, help="forecasts between re-estimations (default 20)")
    parser.add_argument("--level", type=float, action="append", metavar="P",
                        help="tail probability of the VaR and ES (repeatable; default 0.01 and 0.05)")
    parser.add_argument("--paths", type=int, default=10000, help="simulated paths per forecast (default 10000)")
    parser.add_argument("--seed", type=int, default=0, help="seed of the fits' draws and the paths (default 0)")
    parser.add_argument("--draws", type=int, default=FIT_DRAWS,
                        help=f"EIS draws when a fit is simulated (default {FIT_DRAWS})")
    parser.add_argument("--report", help="folder for backtest.txt, backtest.json, backtest.csv and backtest.png")
    parser.add_argument("--store", metavar="FILE", help="SQLite file keeping each finished block, so that a "
                                                         "stopped backtest resumes (the same command again)")
    parser.add_argument("--quiet", action="store_true", help="no progress output")
    parser.set_defaults(handler=_command_backtest)
