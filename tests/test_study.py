"""Monte Carlo studies: definitions, seeds, the store, summaries and the command line (in-process).

Designs are small (sv, T = 200, n_draws = 16, a few replications) to keep the file quick.
"""

import argparse
import dataclasses
import sqlite3

import numpy as np
import pytest

import smle
from smle.errors import SmleInputError
from smle.study import (Design, Estimator, Study, load_study, replication_seeds, run_replication, run_study,
                        study_status, summarize, write_summary, export_csv)
from smle.cli.study import add_study_commands
from smle.study.store import TIMING_COLUMNS

TRUTH = dict(mu=-7.36, phi=0.95, sigma_eta=0.26)
STUDY_TOML = """
[study]
name = "small"
master_seed = 11
[outputs]
store = "small.sqlite"
folder = "summary"
[defaults]
model = "sv"
n_periods = 200
replications = 3
n_draws = 16
[[design]]
name = "phi=0.95"
params = { mu = -7.36, phi = 0.95, sigma_eta = 0.26 }
[[design]]
name = "phi=0.90"
params = { mu = -7.36, phi = 0.90, sigma_eta = 0.363 }
"""


def small_study(store=None, replications=3, **changes):
    design = Design("phi=0.95", "sv", TRUTH, 200, replications, Estimator(n_draws=16))
    return Study("small", 11, (dataclasses.replace(design, **changes),), store=store)


def dump(path):
    connection = sqlite3.connect(path)
    try:
        return list(connection.iterdump())
    finally:
        connection.close()


def rows_without_timing(path):
    connection = sqlite3.connect(path)
    connection.row_factory = sqlite3.Row
    reps = [{k: r[k] for k in r.keys() if k not in TIMING_COLUMNS}
            for r in connection.execute("SELECT * FROM replications ORDER BY design, replication")]
    estimates = [tuple(r) for r in connection.execute("SELECT * FROM estimates ORDER BY design, replication, parameter")]
    connection.close()
    return reps, estimates


@pytest.fixture(scope="module")
def finished_store(tmp_path_factory):
    folder = tmp_path_factory.mktemp("study")
    (folder / "small.toml").write_text(STUDY_TOML)
    study = load_study(folder / "small.toml")
    run_study(study, backend="inprocess", progress=False)
    return folder, study


def test_toml_and_python_definitions_agree(tmp_path):
    (tmp_path / "s.toml").write_text(STUDY_TOML)
    study = load_study(tmp_path / "s.toml")
    assert [d.name for d in study.designs] == ["phi=0.95", "phi=0.90"]
    assert study.designs[0].estimator == Estimator(n_draws=16)
    assert study.designs[1].params == dict(mu=-7.36, phi=0.90, sigma_eta=0.363)
    assert study.store == str(tmp_path / "small.sqlite")
    python = Study("small", 11, (Design("phi=0.95", "sv", TRUTH, 200, 3, Estimator(n_draws=16)),))
    assert replication_seeds(11, python.designs[0], 2) == replication_seeds(11, study.designs[0], 2)


def test_seeds_depend_on_master_design_name_and_replication_only():
    design = small_study().designs[0]
    seeds = {replication_seeds(11, design, r) for r in range(50)}
    assert len(seeds) == 50
    assert replication_seeds(11, design, 3) == replication_seeds(11, dataclasses.replace(design, n_periods=500), 3)
    assert replication_seeds(12, design, 3) != replication_seeds(11, design, 3)
    assert replication_seeds(11, dataclasses.replace(design, name="other"), 3) != replication_seeds(11, design, 3)
    shifted = dataclasses.replace(design, estimator=Estimator(n_draws=16, seed_offset=5))
    assert replication_seeds(11, shifted, 3) == (replication_seeds(11, design, 3)[0], replication_seeds(11, design, 3)[1] + 5)


def test_a_stored_row_can_be_recomputed_alone(finished_store):
    folder, study = finished_store
    row = run_replication(study.designs[1], study.master_seed, 2)
    stored = export_csv(folder / "small.sqlite").set_index(["design", "replication"]).loc[("phi=0.90", 2)]
    for e in row["estimates"]:
        assert e["estimate"] == stored[e["parameter"]]
        assert e["std_error"] == stored[e["parameter"] + "_se"]
    assert row["loglik"] == stored["loglik"]


def test_rerun_of_a_complete_study_changes_nothing(finished_store):
    folder, study = finished_store
    before = dump(folder / "small.sqlite")
    report = run_study(study, backend="inprocess", progress=False)
    assert (report.completed, report.skipped, report.remaining) == (0, 6, 0)
    assert dump(folder / "small.sqlite") == before


def test_summary_matches_numpy_on_the_stored_rows(finished_store):
    folder, study = finished_store
    summary = summarize(folder / "small.sqlite").set_index(["design", "parameter"])
    connection = sqlite3.connect(folder / "small.sqlite")
    for design in study.designs:
        converged = np.array([r[0] for r in connection.execute(
            "SELECT converged FROM replications WHERE design = ? AND status = 'ok'", (design.name,))], float)
        for name, truth in design.params.items():
            est, se, lo, hi = np.array(connection.execute(
                "SELECT estimate, std_error, lower, upper FROM estimates WHERE design = ? AND parameter = ?",
                (design.name, name)).fetchall(), float).T
            s = summary.loc[(design.name, name)]
            n = est.size
            sd = est.std(ddof=1)
            rmse = np.sqrt(np.mean((est - truth) ** 2))
            covered = np.mean((lo <= truth) & (truth <= hi))
            expected = {
                "n": n, "mean": est.mean(), "bias": est.mean() - truth, "median": np.median(est), "sd": sd,
                "rmse": rmse, "mean_se": se.mean(), "se_ratio": se.mean() / sd, "coverage": covered,
                "convergence_rate": converged.mean(), "bias_mcse": sd / np.sqrt(n), "sd_mcse": sd / np.sqrt(2 * (n - 1)),
                "rmse_mcse": np.std((est - truth) ** 2, ddof=1) / np.sqrt(n) / (2 * rmse),
                "coverage_mcse": np.sqrt(covered * (1 - covered) / n), "mean_se_mcse": se.std(ddof=1) / np.sqrt(n),
                "median_mcse": np.sqrt(np.pi / 2) * sd / np.sqrt(n),
            }
            for key, value in expected.items():
                assert s[key] == pytest.approx(value, rel=1e-12, abs=1e-15), (design.name, name, key)
    connection.close()


def test_summary_files_and_figures(finished_store, tmp_path):
    folder, _ = finished_store
    written = write_summary(folder / "small.sqlite", tmp_path)
    text = written["markdown"].read_text()
    assert "## phi=0.90" in text and "| sigma_eta | 0.363 |" in text
    header = written["csv"].read_text().splitlines()[0].split(",")
    assert {"bias", "bias_mcse", "rmse", "coverage", "coverage_mcse", "se_ratio", "convergence_rate"} <= set(header)
    for key in ("bias_rmse", "distributions"):
        assert written[key].stat().st_size > 10_000
    # no designs sharing their data: no paired outputs (tests/test_study_paired.py has them)
    assert set(written) == {"csv", "markdown", "bias_rmse", "distributions"} and "Simulation error" not in text


def test_status_of_a_stopped_study(tmp_path):
    study = small_study(tmp_path / "s.sqlite", replications=3)
    report = run_study(study, backend="inprocess", progress=False, max_replications=2)
    assert (report.completed, report.remaining) == (2, 1)
    status = study_status(tmp_path / "s.sqlite")
    assert status["state"] == "stopped" and status["runner_pid"] is None
    assert (status["ok"], status["failed"], status["missing"]) == (2, 0, 1)
    assert status["smle_version"] == smle.__version__ and status["schema_version"] == 1


def test_failed_replications_are_kept_and_retried_on_request(tmp_path, monkeypatch):
    study = small_study(tmp_path / "f.sqlite", replications=2)
    real_fit = smle.fit
    calls = []

    def flaky_fit(*args, **kwargs):
        calls.append(1)
        if len(calls) == 2:
            raise FloatingPointError("invented failure for the test")
        return real_fit(*args, **kwargs)

    monkeypatch.setattr(smle, "fit", flaky_fit)
    report = run_study(study, backend="inprocess", progress=False)
    assert (report.completed, report.failed) == (1, 1)
    connection = sqlite3.connect(tmp_path / "f.sqlite")
    status, error = connection.execute("SELECT status, error FROM replications WHERE replication = 1").fetchone()
    assert status == "failed" and "invented failure" in error
    assert connection.execute("SELECT COUNT(*) FROM estimates WHERE replication = 1").fetchone()[0] == 0
    connection.close()
    monkeypatch.setattr(smle, "fit", real_fit)
    assert run_study(study, backend="inprocess", progress=False).completed == 0  # failures are not retried by default
    report = run_study(study, backend="inprocess", progress=False, retry_failed=True)
    assert (report.completed, report.failed) == (1, 0)
    connection = sqlite3.connect(tmp_path / "f.sqlite")
    assert connection.execute("SELECT status, attempts FROM replications WHERE replication = 1").fetchone() == ("ok", 2)
    assert connection.execute("SELECT COUNT(*) FROM replications").fetchone()[0] == 2
    connection.close()


# ---------------------------------------------------------------------------------------------
# bad input


@pytest.mark.parametrize("change, words", [
    (dict(model="no-such-model"), ["model = 'no-such-model'", "available", "sv"]),
    (dict(params=dict(mu=-7.0, phi=0.9, sigma=0.3)), ["does not know", "sigma", "sigma_eta"]),
    (dict(params=dict(mu=-7.0, phi=1.2, sigma_eta=0.3)), ["phi", "1.2", "-1 < phi < 1"]),
    (dict(params=dict(mu=-7.0, phi=0.9, sigma_eta=-0.3)), ["sigma_eta", "sigma_eta > 0"]),
    (dict(n_periods=0), ["n_periods = 0", "integer >= 2"]),
    (dict(replications=2.5), ["replications = 2.5"]),
    (dict(estimator=Estimator(n_draws=16, start="guess")), ["start = 'guess'", "data, truth"]),
])
def test_bad_designs_are_refused_before_anything_is_stored(tmp_path, change, words):
    with pytest.raises(SmleInputError) as caught:
        run_study(small_study(tmp_path / "bad.sqlite", **change), backend="inprocess", progress=False)
    message = str(caught.value)
    assert "design 'phi=0.95'" in message
    for word in words:
        assert word in message
    assert not (tmp_path / "bad.sqlite").exists()


@pytest.mark.parametrize("text, words", [
    ("[study]\nname='x'\n", ["master_seed"]),
    ("[study]\nmaster_seed=1\n[[design]]\nname='a'\nmodel='sv'\nparams={mu=-7.0, phi=0.9, sigma_eta=0.3}\n"
     "n_periods=200\nreplications=2\ndraws=16\n", ["unknown key", "draws", "n_draws"]),
    ("[study]\nmaster_seed=-1\n[[design]]\nname='a'\nmodel='sv'\nparams={mu=-7.0, phi=0.9, sigma_eta=0.3}\n"
     "n_periods=200\nreplications=2\n", ["master_seed = -1"]),
    ("[study]\nmaster_seed=1\n[[design]]\nname='a'\nmodel='sv'\nparams={mu=-7.0, phi=0.9, sigma_eta=0.3}\n"
     "n_periods=200\nreplications=2\n[[design]]\nname='a'\nmodel='sv'\nparams={mu=-7.0, phi=0.9, sigma_eta=0.3}\n"
     "n_periods=200\nreplications=2\n", ["unique", "a"]),
    ("[study\n", ["not valid TOML"]),
])
def test_bad_study_files(tmp_path, text, words):
    (tmp_path / "s.toml").write_text(text)
    with pytest.raises(SmleInputError) as caught:
        load_study(tmp_path / "s.toml")
    for word in words:
        assert word in str(caught.value)


def _copy_store(finished_store, tmp_path):
    folder, _ = finished_store
    source = sqlite3.connect(folder / "small.sqlite")
    target = sqlite3.connect(tmp_path / "copy.sqlite")
    source.backup(target)
    source.close()
    target.close()
    return tmp_path / "copy.sqlite"


@pytest.mark.parametrize("statement, words", [
    ("UPDATE meta SET value = '99' WHERE key = 'schema_version'", ["schema version 99", "reads schema version 1"]),
    ("UPDATE meta SET value = '0.0.1' WHERE key = 'smle_version'", ["smle 0.0.1", "allow_new_version"]),
])
def test_a_store_of_an_incompatible_version_is_refused_and_left_alone(finished_store, tmp_path, statement, words):
    path = _copy_store(finished_store, tmp_path)
    connection = sqlite3.connect(path)
    connection.execute(statement)
    connection.commit()
    connection.close()
    before = dump(path)
    study = dataclasses.replace(finished_store[1], store=str(path))
    bigger = dataclasses.replace(study, designs=tuple(dataclasses.replace(d, replications=5) for d in study.designs))
    with pytest.raises(SmleInputError) as caught:
        run_study(bigger, backend="inprocess", progress=False)
    for word in words:
        assert word in str(caught.value)
    assert dump(path) == before


def test_a_changed_design_or_seed_is_refused_and_the_store_left_alone(finished_store, tmp_path):
    path = _copy_store(finished_store, tmp_path)
    before = dump(path)
    study = dataclasses.replace(finished_store[1], store=str(path))
    changed = dataclasses.replace(study, designs=(dataclasses.replace(study.designs[0], n_periods=300),))
    with pytest.raises(SmleInputError, match="design 'phi=0.95' differs from its definition"):
        run_study(changed, backend="inprocess", progress=False)
    with pytest.raises(SmleInputError, match="master_seed = 12 differs"):
        run_study(dataclasses.replace(study, master_seed=12), backend="inprocess", progress=False)
    assert dump(path) == before


def test_a_file_that_is_not_a_store_is_refused(tmp_path):
    (tmp_path / "junk.sqlite").write_text("not a database at all, just text " * 50)
    with pytest.raises(SmleInputError, match="not an smle study store"):
        run_study(small_study(tmp_path / "junk.sqlite"), backend="inprocess", progress=False)


def test_an_unreachable_scheduler_is_a_clear_error_and_nothing_is_touched(finished_store, tmp_path):
    pytest.importorskip("distributed")
    path = _copy_store(finished_store, tmp_path)
    before = dump(path)
    study = dataclasses.replace(finished_store[1], store=str(path))
    bigger = dataclasses.replace(study, designs=tuple(dataclasses.replace(d, replications=5) for d in study.designs))
    with pytest.raises(SmleInputError) as caught:
        run_study(bigger, scheduler="tcp://127.0.0.1:9", scheduler_timeout=2, progress=False)
    assert "scheduler = 'tcp://127.0.0.1:9' could not be reached" in str(caught.value)
    assert dump(path) == before


# ---------------------------------------------------------------------------------------------
# command line


def cli(argv):
    parser = argparse.ArgumentParser(prog="smle")
    commands = parser.add_subparsers(dest="command", required=True)
    add_study_commands(commands)
    args = parser.parse_args(argv)
    return args.handler(args)


def test_command_line(tmp_path, capsys):
    (tmp_path / "s.toml").write_text(STUDY_TOML.replace("replications = 3", "replications = 2"))
    study_file = str(tmp_path / "s.toml")
    assert cli(["study", "run", study_file, "--backend", "inprocess", "--max-replications", "3"]) == 0
    assert "3 replications completed" in capsys.readouterr().out
    assert cli(["study", "status", study_file]) == 0
    out = capsys.readouterr().out
    assert "stopped" in out and "3 ok + 0 failed of 4 planned, 1 missing" in out
    assert cli(["study", "run", study_file, "--backend", "inprocess", "--quiet"]) == 0
    assert "1 replications completed, 0 failed, 3 already stored, 0 missing" in capsys.readouterr().out
    assert cli(["study", "status", str(tmp_path / "small.sqlite")]) == 0
    assert "complete" in capsys.readouterr().out
    assert cli(["study", "summary", study_file, "--no-figures"]) == 0
    assert "## phi=0.90" in capsys.readouterr().out
    assert (tmp_path / "summary" / "summary.csv").exists()
    assert cli(["study", "export", study_file, "--output", str(tmp_path / "rows.csv")]) == 0
    lines = (tmp_path / "rows.csv").read_text().splitlines()
    assert len(lines) == 5 and "sigma_eta_upper" in lines[0]
    with pytest.raises(SmleInputError, match="does not exist"):
        cli(["study", "status", str(tmp_path / "missing.sqlite")])


# ---------------------------------------------------------------------------------------------
# intervals for proportions, figures against the design


@pytest.mark.parametrize("successes, n", [(4, 4), (0, 4), (3, 10), (19, 20), (50, 100), (1, 1)])
def test_wilson_interval_matches_statsmodels(successes, n):
    # Reference: statsmodels' proportion_confint(method="wilson"), the score interval of
    # Wilson (1927), Journal of the American Statistical Association 22, 209-212.
    from statsmodels.stats.proportion import proportion_confint

    from smle.study.summary import wilson_interval

    expected = proportion_confint(successes, n, alpha=0.05, method="wilson")
    assert wilson_interval(successes, n) == pytest.approx(expected, rel=1e-12, abs=1e-15)


def test_coverage_is_shown_with_its_wilson_interval(finished_store):
    from smle.study.summary import markdown_tables, wilson_interval

    folder, _ = finished_store
    summary = summarize(folder / "small.sqlite")
    for r in summary.itertuples():
        lower, upper = wilson_interval(round(r.coverage * r.n_ci), r.n_ci)
        assert (r.coverage_lower, r.coverage_upper) == pytest.approx((lower, upper), rel=1e-12)
        assert r.coverage_upper - r.coverage_lower > 0.2  # 3 replications: never "1 ± 0"
    text = markdown_tables(summary)
    r = summary.iloc[0]
    assert f"| {r.coverage:.3g} [{r.coverage_lower:.2g}, {r.coverage_upper:.2g}] |" in text
    assert "Wilson" in text and " ± 0 |" not in text


def _drawn_axes(monkeypatch, summary, tmp_path):
    """The axes of the bias/RMSE figure, caught as the figure is closed."""
    import matplotlib.pyplot as plt

    from smle.study.figures import bias_rmse_against_length

    caught, close = [], plt.close
    monkeypatch.setattr(plt, "close", lambda fig=None: (caught.append(fig), close(fig)))
    bias_rmse_against_length(summary, tmp_path / "f.png")
    return caught[0].axes


def test_bias_figure_uses_designs_when_all_have_one_length(finished_store, tmp_path, monkeypatch):
    folder, study = finished_store
    summary = summarize(folder / "small.sqlite")
    assert summary["n_periods"].nunique() == 1
    axes = _drawn_axes(monkeypatch, summary, tmp_path)
    assert axes[0].get_xlabel() == "design"
    assert [t.get_text() for t in axes[0].get_xticklabels()] == [d.name for d in study.designs]
    two_lengths = summary.assign(n_periods=np.where(summary["design"] == "phi=0.90", 500, 200))
    axes = _drawn_axes(monkeypatch, two_lengths, tmp_path)
    assert axes[0].get_xlabel() == "sample length T"
