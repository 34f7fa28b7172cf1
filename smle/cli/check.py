"""The ``smle check`` command: the likelihood health check from the command line.

    smle check DATA.csv --model sv --params mu=-7.36,phi=0.95,sigma_eta=0.26
    smle check DATA.csv --from-fit result.json --report check/
"""

from __future__ import annotations

import sys
from pathlib import Path

from smle.errors import SmleInputError

EXIT_CODES = {"healthy": 0, "doubtful": 1, "unreliable": 3}

_EPILOG = """exit status: 0 healthy, 1 doubtful, 3 unreliable, 2 bad input.
The report folder (--report) receives check.txt, check.json and four figures:
loglik_seeds.png, weight_tail.png, nse_scaling.png, period_contributions.png."""


def _parse_params(text: str) -> dict[str, float]:
    params = {}
    for item in filter(None, (part.strip() for part in text.split(","))):
        name, sep, value = item.partition("=")
        try:
            if not sep or not name.strip():
                raise ValueError
            params[name.strip()] = float(value)
        except ValueError:
            raise SmleInputError(f"--params item {item!r} is not accepted; accepted: name=value pairs separated "
                                 "by commas, e.g. mu=-7.36,phi=0.95,sigma_eta=0.26") from None
    if not params:
        raise SmleInputError(f"--params {text!r} names no parameter; accepted: e.g. mu=-7.36,phi=0.95,sigma_eta=0.26")
    return params


def _parse_grid(text: str):
    if text.strip().lower() == "none":
        return None
    try:
        return tuple(int(part) for part in text.split(",") if part.strip())
    except ValueError:
        raise SmleInputError(f"--grid {text!r} is not accepted; accepted: draws separated by commas, e.g. "
                             "16,32,64,128, or 'none' to skip the NSE scaling") from None


def _model_and_params(args):
    import smle

    if (args.params is None) == (args.from_fit is None):
        raise SmleInputError("give exactly one of --params NAME=VALUE,... and --from-fit RESULT.json")
    from smle.cli.shared import model_from_args, read_saved_fit

    if args.params is not None:
        return model_from_args(args.model, args.option), _parse_params(args.params)

    fitted = read_saved_fit(args.from_fit, "--from-fit")
    return smle.get_model(fitted.model, **fitted.model_options), dict(fitted.params)


def _command_check(args) -> int:
    import smle
    from smle.cli.shared import read_observations

    model, params = _model_and_params(args)
    observations = read_observations(args.data, args.column, args.prices, args.drop_missing, model)
    y, dates, label = observations.values, observations.dates, observations.label

    def progress(text):
        print(f"smle check: {text}", file=sys.stderr, flush=True)

    from smle.diagnostics.health import EstimatorBreakdown

    try:
        report = smle.check(model, params, y, n_draws=args.draws, n_seeds=args.seeds, seed=args.seed,
                            tail_draws=args.tail_draws, draws_grid=_parse_grid(args.grid), dates=dates,
                            control_variates=args.control_variates, progress=None if args.quiet else progress)
    except EstimatorBreakdown as breakdown:
        print(f"smle check: {breakdown}", file=sys.stderr)
        return EXIT_CODES["unreliable"]
    print(f"data: {args.data}, {label}")
    print(report.summary())
    if args.report:
        written = report.write(args.report)
        print(f"\nreport written to {Path(args.report)}/ ({', '.join(p.name for p in written)})")
    return EXIT_CODES[report.verdict]


def add_check_command(commands) -> None:
    """Register ``smle check`` on the ``smle`` sub-command parser."""
    import argparse

    from smle.cli.shared import add_column_options, add_option_flag

    check = commands.add_parser(
        "check", help="health check of the simulated likelihood at given parameters (noise, weight tail, NSE)",
        description="How noisy is the EIS log-likelihood at these parameters, and is the variance of its "
                    "importance weights finite? Runs many seeds, a large tail run and an NSE-against-draws "
                    "grid, and ends with a verdict: healthy, doubtful or unreliable.",
        epilog=_EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    check.add_argument("data", help="CSV file with a column of returns (or prices with --prices)")
    check.add_argument("--model", default="sv", help="registered model name with --params (default sv)")
    check.add_argument("--params", help="parameter values, e.g. mu=-7.36,phi=0.95,sigma_eta=0.26")
    check.add_argument("--from-fit", help="take the model and parameters from a saved fit (result.json of smle fit)")
    add_column_options(check)
    add_option_flag(check)
    check.add_argument("--draws", type=int, default=64, help="EIS draws of the runs being checked (default 64)")
    check.add_argument("--seeds", type=int, default=20, help="independent seeds for the spread (default 20, least 3)")
    check.add_argument("--seed", type=int, default=0, help="base seed: runs use seed, seed+1, ... (default 0)")
    check.add_argument("--tail-draws", type=int, default=2000,
                       help="scoring draws of the weight-tail run (default 2000; least 100)")
    check.add_argument("--grid", default="16,32,64,128,256",
                       help="draws at which the NSE is measured (default 16,32,64,128,256; 'none' skips)")
    check.add_argument("--control-variates", choices=["independent", "draws", "both"],
                       help="check the corrected estimator; the report adds the measured variance reduction")
    check.add_argument("--report", help="folder for check.txt, check.json and the figures")
    check.add_argument("--quiet", action="store_true", help="no progress lines on standard error")
    check.set_defaults(handler=_command_check)
