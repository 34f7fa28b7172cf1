"""Resumable backtests (smle.backtest(..., store=PATH), smle backtest --store): a backtest stopped
after some blocks, by an exception or by SIGKILL, resumes from its store to exactly the numbers of
an uninterrupted run without a store (hits, VaR, ES, log scores, estimates); a store made with
other settings or data is refused, naming what differs.

The reference is the in-memory backtest of smle.decision.backtest, unchanged by the store. The
garch model (closed-form likelihood) keeps each block to a fraction of a second; the window of
300 periods is that of tests/test_backtest.py, so the compiled programs are shared.
"""


import numpy as np
import pytest

import smle
from _processes import count_rows, sigkill_when
from smle.decision.backtest import backtest as in_memory

WINDOW, N_FORECASTS, EVERY = 300, 30, 5  # 6 blocks
SETTINGS = dict(levels=(0.01, 0.05), n_paths=1000, seed=3, fixed={"ar1": 0.0})
GARCH = {"mu": 0.03, "ar1": 0.0, "omega": 0.05, "alpha": 0.1, "beta": 0.85}


@pytest.fixture(scope="module")
def data():
    return np.asarray(smle.simulate("garch", GARCH, WINDOW + N_FORECASTS, seed=8)[0])


@pytest.fixture(scope="module")
def reference(data):
    return in_memory("garch", data, WINDOW, EVERY, progress=False, **SETTINGS)


def assert_same_backtest(got, want):
    for name in ("periods", "realized", "value_at_risk", "var_se", "expected_shortfall", "hits", "log_score"):
        np.testing.assert_array_equal(getattr(got, name), getattr(want, name), err_msg=name)
    assert got.refits == want.refits
    assert [list(r["params"]) for r in got.refits] == [list(r["params"]) for r in want.refits]  # order kept


def stored_blocks(path):
    return count_rows(path, "blocks")


class Stop(Exception):
    pass


def test_an_interrupted_backtest_resumes_to_the_uninterrupted_numbers(data, reference, tmp_path):
    store = tmp_path / "bt.sqlite"
    seen = []

    def stop_after_two(message):  # the opening message, then one per stored block
        seen.append(message)
        if len(seen) == 3:
            raise Stop(message)

    with pytest.raises(Stop):
        smle.backtest("garch", data, WINDOW, EVERY, store=store, progress=stop_after_two, **SETTINGS)
    assert stored_blocks(store) == 2 and "each committed to" in seen[0]
    messages = []
    resumed = smle.backtest("garch", data, WINDOW, EVERY, store=store, progress=messages.append, **SETTINGS)
    assert "2 of 6 blocks already in" in messages[0] and "resuming at block 3" in messages[0]
    assert len(messages) == 1 + 4 and stored_blocks(store) == 6
    assert_same_backtest(resumed, reference)
    assert resumed.refits[0]["converged"] and len(resumed.refits) == 6
    # a complete store: nothing computed, the same backtest
    again = smle.backtest("garch", data, WINDOW, EVERY, store=store, progress=False, **SETTINGS)
    assert_same_backtest(again, reference)
    # without a store, smle.backtest is the in-memory backtest
    assert_same_backtest(smle.backtest("garch", data, WINDOW, EVERY, progress=False, **SETTINGS), reference)


def test_a_store_of_other_settings_is_refused(data, tmp_path):
    store = tmp_path / "bt.sqlite"
    short = data[:WINDOW + 10]
    smle.backtest("garch", short, WINDOW, EVERY, store=store, progress=False, **SETTINGS)
    for change, named in ((dict(refit_every=2), "refit_every: stored 5, given 2"),
                          (dict(seed=4), "seed: stored 3, given 4"),
                          (dict(levels=(0.05,)), "levels: stored [0.01,0.05], given [0.05]"),
                          (dict(model="garch-mix"), "model: stored \"garch\", given \"garch-mix\""),
                          (dict(fixed={"ar1": 0.1}), "fixed: stored {\"ar1\":0.0}, given {\"ar1\":0.1}"),
                          (dict(y=short * 1.001), "data: stored \"[310] sha256"),
                          (dict(n_draws=32), "fit_options: stored {}, given {\"n_draws\":32}")):
        arguments = {"model": "garch", "y": short, "window": WINDOW, "refit_every": EVERY, **SETTINGS, **change}
        with pytest.raises(smle.SmleInputError, match="was made with other settings") as caught:
            smle.backtest(store=store, progress=False, **arguments)
        assert named in str(caught.value) and "the store was not changed" in str(caught.value)
    assert stored_blocks(store) == 2
    # another label in the same store is another backtest
    smle.backtest("garch", short, WINDOW, 2, store=store, label="rival", progress=False, **SETTINGS)
    assert stored_blocks(store) == 2 + 5
    # a study store is not a backtest store, and the reverse
    from smle.study import check_compatible

    with pytest.raises(smle.SmleInputError, match="is a backtest store, not a study store"):
        check_compatible(store)
    (tmp_path / "not.sqlite").write_text("some text")
    with pytest.raises(smle.SmleInputError, match="not an smle backtest store"):
        smle.backtest("garch", short, WINDOW, EVERY, store=tmp_path / "not.sqlite", progress=False, **SETTINGS)
    for bad, match in ((dict(store=3), "store = 3"), (dict(store=store, label=""), "label")):
        with pytest.raises(smle.SmleInputError, match=match):
            smle.backtest("garch", short, WINDOW, EVERY, progress=False, **SETTINGS, **bad)


RUNNER = """
import sys, time
import numpy as np
import smle
y = np.load(sys.argv[1])
# a pause after each stored block, so that the kill lands mid-run however fast the blocks are
smle.backtest("garch", y, {window}, {every}, store=sys.argv[2], progress=lambda message: time.sleep(0.5),
              levels=(0.01, 0.05), n_paths=1000, seed=3, fixed={{"ar1": 0.0}})
""".format(window=WINDOW, every=EVERY)


def test_a_sigkilled_backtest_resumes_to_the_uninterrupted_numbers(data, reference, tmp_path):
    np.save(tmp_path / "y.npy", data)
    store = tmp_path / "killed.sqlite"
    sigkill_when(["-c", RUNNER, str(tmp_path / "y.npy"), str(store)], lambda: stored_blocks(store) >= 2)
    partial = stored_blocks(store)
    assert 2 <= partial < 6
    # the killed writer's claim is left in the store; it is not alive, so the resume takes over
    messages = []
    resumed = smle.backtest("garch", data, WINDOW, EVERY, store=store, progress=messages.append, **SETTINGS)
    assert f"{partial} of 6 blocks already in" in messages[0]
    assert_same_backtest(resumed, reference)


def test_backtest_command_with_a_store(data, reference, tmp_path, capsys):
    import pandas as pd

    from smle.cli.app import main

    pd.DataFrame({"ret": data}).to_csv(tmp_path / "d.csv", index=False)
    command = ["backtest", str(tmp_path / "d.csv"), "--model", "garch:ar1=0", "--window", str(WINDOW),
               "--refit-every", str(EVERY), "--paths", "1000", "--seed", "3", "--store", str(tmp_path / "s.sqlite")]
    assert main(command + ["--quiet"]) == 0
    first = capsys.readouterr().out
    assert main(command) == 0
    second = capsys.readouterr()
    assert "6 of 6 blocks already in" in second.err
    # the same report, elapsed time included (the sum of the stored blocks' own times)
    assert first == second.out and "30 one-step forecasts" in first
    assert main(command[:-1] + [str(tmp_path / "s.sqlite"), "--seed", "4"]) == 2
    assert "seed: stored 3, given 4" in capsys.readouterr().err
