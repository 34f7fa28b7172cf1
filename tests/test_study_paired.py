"""Designs that share their simulated data (``data_from``): the same series, refusals, and the
summary of EIS against exact maximum likelihood on it.

The end-to-end study is small (sv, T = 200, 3 replications, n_draws = 16, in-process), the shape
of tests/test_study.py. The reference of the paired table is a direct computation from the
store's rows with NumPy and SQLite, outside the pandas code under test.
"""

import dataclasses
import json
import sqlite3

import numpy as np
import pandas as pd
import pytest

import smle
from smle.errors import SmleInputError
from smle.study import (Design, Estimator, Study, design_pairs, load_study, paired_differences, replication_seeds,
                        run_study, summarize, write_summary)
from smle.study.store import Store

TRUTH = dict(mu=-7.36, phi=0.95, sigma_eta=0.26)
PAIRED_TOML = """
[study]
name = "paired"
master_seed = 14
[outputs]
store = "paired.sqlite"
[defaults]
model = "sv"
params = { mu = -7.36, phi = 0.95, sigma_eta = 0.26 }
n_periods = 200
replications = 3
n_draws = 16
[[design]]
name = "eis"
[[design]]
name = "exact"
method = "exact"
data_from = "eis"
"""


def pair(**changes):
    eis = Design("eis", "sv", TRUTH, 200, 3, Estimator(n_draws=16))
    exact = Design("exact", "sv", TRUTH, 200, 3, Estimator(n_draws=16, method="exact"), data_from="eis")
    return Study("paired", 14, (eis, dataclasses.replace(exact, **changes)))


@pytest.fixture(scope="module")
def paired_store(tmp_path_factory):
    folder = tmp_path_factory.mktemp("paired")
    (folder / "paired.toml").write_text(PAIRED_TOML)
    study = load_study(folder / "paired.toml")
    report = run_study(study, backend="inprocess", progress=False)
    assert (report.completed, report.failed) == (6, 0)
    return folder / "paired.sqlite", study


def test_shared_designs_see_the_same_series_with_their_own_estimator_seeds():
    study = pair()
    eis, exact = study.designs
    for r in range(5):
        (data_eis, seed_eis), (data_exact, seed_exact) = (replication_seeds(14, d, r) for d in (eis, exact))
        assert data_exact == data_eis and seed_exact != seed_eis
        # without data_from the design would draw other data: the seed really comes from 'eis'
        assert replication_seeds(14, dataclasses.replace(exact, data_from=None), r) == (replication_seeds(14, "exact", r))
        assert replication_seeds(14, dataclasses.replace(exact, data_from=None), r)[0] != data_eis
    series = [smle.simulate(d.model, d.params, d.n_periods, seed=replication_seeds(14, d, 1)[0])[0] for d in (eis, exact)]
    np.testing.assert_array_equal(series[0], series[1])
    assert np.std(series[0]) > 0


def test_data_from_is_in_the_identity_only_when_set():
    eis, exact = pair().designs
    assert "data_from" not in eis.identity() and exact.identity()["data_from"] == "eis"
    assert Design.from_dict(exact.to_dict()) == exact


@pytest.mark.parametrize("changes, words", [
    (dict(data_from="missing"), ["design 'exact'", "data_from = 'missing'", "another design", "eis"]),
    (dict(data_from="exact"), ["design 'exact'", "data_from = 'exact'", "another design"]),
    (dict(params=dict(TRUTH, phi=0.9)), ["design 'exact'", "'eis'", "params", "0.9", "0.95"]),
    (dict(n_periods=300), ["design 'exact'", "'eis'", "n_periods is 300", "200"]),
    (dict(model="sv-t", params=dict(TRUTH, nu=8.0)), ["design 'exact'", "'eis'", "model is 'sv-t'"]),
])
def test_a_bad_data_from_is_refused_naming_both_designs_and_the_field(tmp_path, changes, words):
    with pytest.raises(SmleInputError) as caught:
        run_study(dataclasses.replace(pair(**changes), store=tmp_path / "bad.sqlite"), backend="inprocess",
                  progress=False)
    for word in words:
        assert word in str(caught.value)
    assert not (tmp_path / "bad.sqlite").exists()


def test_a_chain_of_data_from_is_refused(tmp_path):
    study = pair()
    third = dataclasses.replace(study.designs[1], name="third", data_from="exact")
    text = PAIRED_TOML + '[[design]]\nname = "third"\ndata_from = "exact"\n'
    (tmp_path / "chain.toml").write_text(text)
    for attempt in (lambda: run_study(dataclasses.replace(study, designs=study.designs + (third,),
                                                          store=tmp_path / "c.sqlite"), progress=False),
                    lambda: load_study(tmp_path / "chain.toml")):
        with pytest.raises(SmleInputError, match="design 'third'.*takes its own data from 'eis'"):
            attempt()


def test_pairs_follow_data_from_and_the_resolved_method():
    def definition(method=None, data_from=None, model="sv"):
        out = {"model": model, "estimator": {} if method is None else {"method": method}}
        return out | ({"data_from": data_from} if data_from else {})

    designs = pd.DataFrame({"name": ["a", "b", "c", "d", "e"], "definition": [
        definition(), definition("auto", "a"), definition(None, "a"), definition("exact"), definition("eis", "d")]})
    assert design_pairs(designs) == [("a", "b"), ("c", "b"), ("e", "d")]
    alone = pd.DataFrame({"name": ["a", "b"], "definition": [definition(), definition("exact")]})
    assert design_pairs(alone) == []  # the same settings but their own data: no pair


def _direct_pairs(path):
    """Per parameter, (EIS, exact, truth) arrays of the replications both designs fitted, read with SQL."""
    connection = sqlite3.connect(path)
    rows = connection.execute(
        "SELECT a.parameter, a.estimate, b.estimate, a.truth FROM estimates a JOIN estimates b "
        "ON a.replication = b.replication AND a.parameter = b.parameter "
        "JOIN replications ra ON ra.design = a.design AND ra.replication = a.replication "
        "JOIN replications rb ON rb.design = b.design AND rb.replication = b.replication "
        "WHERE a.design = 'eis' AND b.design = 'exact' AND ra.status = 'ok' AND rb.status = 'ok'").fetchall()
    fits = np.array(connection.execute(
        "SELECT ra.loglik, ra.exact_loglik, ra.nse, rb.loglik FROM replications ra JOIN replications rb "
        "ON ra.replication = rb.replication AND ra.data_seed = rb.data_seed "
        "WHERE ra.design = 'eis' AND rb.design = 'exact'").fetchall(), float)
    connection.close()
    out = {}
    for parameter, eis, exact, truth in rows:
        out.setdefault(parameter, []).append((eis, exact, truth))
    return {p: np.array(v, float).T for p, v in out.items()}, fits


def test_the_paired_table_equals_a_direct_computation(paired_store):
    path, _ = paired_store
    table = paired_differences(path).set_index("parameter")
    assert set(table["eis_design"]) == {"eis"} and set(table["exact_design"]) == {"exact"}
    pairs, fits = _direct_pairs(path)
    assert set(pairs) == set(TRUTH) == set(table.index)
    for parameter, (eis, exact, truth) in pairs.items():
        d = eis - exact
        rmse = np.sqrt(np.mean((eis - truth) ** 2))
        expected = {"n_pairs": 3, "mean_difference": d.mean(), "sd_difference": d.std(ddof=1),
                    "mean_difference_mcse": d.std(ddof=1) / np.sqrt(3), "sd_difference_mcse": d.std(ddof=1) / 2,
                    "rmse_eis": rmse, "rmse_exact": np.sqrt(np.mean((exact - truth) ** 2)),
                    "simulation_share": d.std(ddof=1) / rmse}
        for key, value in expected.items():
            assert table.loc[parameter, key] == pytest.approx(value, rel=1e-12, abs=1e-15), (parameter, key)
        assert np.all(d != 0)  # EIS and exact estimates of a series differ: a real simulation error
    error = fits[:, 0] - fits[:, 1]
    row = table.iloc[0]
    assert row["n_loglik"] == 3 and np.all(np.isfinite(fits))
    assert row["loglik_error_mean"] == pytest.approx(error.mean(), rel=1e-12)
    assert row["loglik_error_sd"] == pytest.approx(error.std(ddof=1), rel=1e-12)
    assert row["mean_nse"] == pytest.approx(fits[:, 2].mean(), rel=1e-12)
    assert row["loglik_loss_mean"] == pytest.approx(np.mean(fits[:, 3] - fits[:, 1]), rel=1e-12)


def test_paired_rows_are_the_replications_both_designs_fitted(paired_store):
    path, _ = paired_store
    connection = sqlite3.connect(path)
    seeds = connection.execute("SELECT design, replication, data_seed, eis_seed FROM replications").fetchall()
    connection.close()
    by_design = {d: {r: (data, eis) for dd, r, data, eis in seeds if dd == d} for d in ("eis", "exact")}
    assert all(by_design["eis"][r][0] == by_design["exact"][r][0] for r in range(3))
    # the exact maximum is at least the exact value at the EIS estimate (up to the optimiser's tolerance)
    assert paired_differences(path)["loglik_loss_mean"].iloc[0] > -1e-6


def test_summary_files_of_a_paired_study(paired_store, tmp_path):
    path, study = paired_store
    written = write_summary(path, tmp_path)
    text = written["markdown"].read_text()
    assert "## Simulation error: 'eis' (EIS) against 'exact' (exact maximum likelihood)" in text
    assert "| sigma_eta | 0.26 | 3 |" in text and "Log-likelihood (3 fits)" in text
    csv = pd.read_csv(written["paired_csv"])
    assert list(csv["parameter"]) == list(TRUTH) and {"sd_difference", "simulation_share"} <= set(csv.columns)
    assert written["paired"].stat().st_size > 10_000
    # the per-design tables are those of an unpaired study
    per_design = summarize(path)
    assert list(dict.fromkeys(per_design["design"])) == ["eis", "exact"] and "eis_design" not in per_design


def test_a_store_without_the_exact_loglik_column_reads_and_is_upgraded(paired_store, tmp_path):
    path, study = paired_store
    copy = tmp_path / "old.sqlite"
    source, target = sqlite3.connect(path), sqlite3.connect(copy)
    source.backup(target)
    source.close()
    target.execute("ALTER TABLE replications DROP COLUMN exact_loglik")
    target.commit()
    target.close()
    old = paired_differences(copy)
    assert (old["n_loglik"] == 0).all() and old["sd_difference"].notna().all()
    assert "no exact value" in write_summary(copy, tmp_path / "s", figures=False)["markdown"].read_text()
    Store(copy, study).close()  # a runner opening it adds the column, keeping every row
    connection = sqlite3.connect(copy)
    columns = [r[1] for r in connection.execute("PRAGMA table_info(replications)")]
    definitions = [json.loads(r[0]) for r in connection.execute("SELECT definition FROM designs ORDER BY position")]
    assert "exact_loglik" in columns and connection.execute("SELECT COUNT(*) FROM replications").fetchone()[0] == 6
    connection.close()
    assert definitions[1]["data_from"] == "eis" and "data_from" not in definitions[0]
