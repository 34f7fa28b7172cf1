"""The commented example study file that ``smle study example PATH`` writes."""

from __future__ import annotations

from pathlib import Path

from smle.errors import SmleInputError

EXAMPLE_STUDY = """\
# An smle Monte Carlo study (TOML). Run:      smle study run THIS_FILE
# Watch it from another terminal:             smle study status THIS_FILE
# Tables and figures when done (or at any time): smle study summary THIS_FILE
# Every key is described by `smle study --help`.

[study]
name = "example"
master_seed = 2024            # root of every replication's seeds (integer >= 0)
description = "sv at two sample lengths and two persistences; invented settings for a first look"

[outputs]                     # paths relative to this file
store = "example.sqlite"      # results, one committed row per replication; a rerun resumes
folder = "example-summary"    # summary.csv, summary.md, figures

[defaults]                    # applied to every [[design]] below, which may override them
model = "sv"
replications = 20             # raise it later: stored replications are kept
n_draws = 16                  # EIS draws per set (antithetic by default)
start = "data"                # or "truth": start the optimiser at the true parameters

[[design]]
name = "phi=0.95, T=200"      # the name is part of the seeds: keep it once results exist
params = { mu = -7.36, phi = 0.95, sigma_eta = 0.26 }
n_periods = 200

[[design]]
name = "phi=0.95, T=800"
params = { mu = -7.36, phi = 0.95, sigma_eta = 0.26 }
n_periods = 800

[[design]]
name = "phi=0.90, T=200"
params = { mu = -7.36, phi = 0.90, sigma_eta = 0.363 }
n_periods = 200
"""


def write_example(path) -> Path:
    """Write :data:`EXAMPLE_STUDY` to ``path`` (refusing to overwrite a file); return the path."""
    path = Path(path)
    if path.suffix.lower() != ".toml":
        raise SmleInputError(f"path = {str(path)!r} is not accepted; accepted: a file name ending in .toml")
    if path.exists():
        raise SmleInputError(f"path = {str(path)!r} already exists; accepted: a new file (nothing was written)")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(EXAMPLE_STUDY)
    return path
