"""The ``smle compare`` command: several models fitted to the same column, one table.

    smle compare DATA.csv --model garch --model garch:innovations=t --fix ar1=0 --report cmp/
"""

from __future__ import annotations

from pathlib import Path

_EPILOG = """A model is NAME[:key=value,...]: keys naming a parameter hold it at the value, the other
keys are model options (see 'smle models'), e.g. garch:innovations=nig or garch-mix:rho=0.
--fix NAME=VALUE holds that parameter in every model that has it.
The report folder (--report) receives compare.txt, compare.json and compare.png.
exit status: 0 every fit converged, 3 some did not, 2 bad input."""


def _command_compare(args) -> int:
    from smle.cli.shared import parse_fixed, parse_model_spec, read_observations
    from smle.decision.compare import ModelSpec, compare
    from smle.models.base import model_options

    observations = read_observations(args.data, args.column, args.prices, args.drop_missing)
    y, label = observations.values, observations.label
    fixed = parse_fixed(args.fix)
    specs = []
    for text in args.model:
        model, held = parse_model_spec(text, fixed)
        options = {k: v for k, v in model_options(model).items() if v != model_options(type(model)())[k]}
        specs.append(ModelSpec.of({"model": model.name, "options": options, "fixed": held}))
    comparison = compare(specs, y, n_draws=args.draws, seed=args.seed, method=args.method)
    print(f"data: {args.data}, {label}")
    print(comparison.summary())
    if args.report:
        folder = Path(args.report)
        folder.mkdir(parents=True, exist_ok=True)
        (folder / "compare.txt").write_text(comparison.summary() + "\n")
        comparison.to_json(folder / "compare.json")
        comparison.figure(folder / "compare.png")
        print(f"\nreport written to {folder}/ (compare.txt, compare.json, compare.png)")
    return 0 if all(f.converged for f in comparison.fits) else 3


def add_compare_command(commands) -> None:
    """Register ``smle compare`` on the ``smle`` sub-command parser."""
    import argparse

    from smle.cli.shared import FIT_DRAWS, add_column_options, add_fix_option

    parser = commands.add_parser(
        "compare", help="fit several models to the same data: log-likelihoods, AIC/BIC, tests of nested pairs",
        description="Fits each --model to the same column and prints one table: log-likelihood with its "
                    "simulation error, free parameters, AIC, BIC, and likelihood-ratio tests of the nested pairs.",
        epilog=_EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("data", help="CSV file with a column of returns (or prices with --prices)")
    parser.add_argument("--model", action="append", required=True,
                        help="a model to fit, NAME[:key=value,...] (give two or more)")
    add_fix_option(parser)
    add_column_options(parser)
    parser.add_argument("--method", choices=["auto", "exact", "eis"], default="auto",
                        help="likelihood of the latent-state models: auto (default: exact for one-dimensional states), "
                             "exact or eis")
    parser.add_argument("--draws", type=int, default=FIT_DRAWS,
                        help=f"EIS draws per set for simulated likelihoods (default {FIT_DRAWS})")
    parser.add_argument("--seed", type=int, default=0, help="seed of the common random numbers (default 0)")
    parser.add_argument("--report", help="folder for compare.txt, compare.json and compare.png")
    parser.set_defaults(handler=_command_compare)
