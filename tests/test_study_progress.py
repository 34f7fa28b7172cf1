"""Progress of a running study: the time-left estimate as a pure function of synthetic timings.

No clocks are read for the assertions: the rows carry invented compute times.
"""

import io

import pytest

from smle.study import Design, Estimator
from smle.study.runner import Progress, compile_shape, remaining_seconds

TRUTH = dict(mu=-7.36, phi=0.95, sigma_eta=0.26)


def test_no_estimate_until_enough_replications_ran_warm():
    # Two workers each finish their first replication (compilation included): nothing warm yet.
    finished = [("a", "w1", 30.0), ("a", "w2", 31.0), ("a", "w1", 2.0), ("a", "w2", 2.0)]
    assert remaining_seconds(finished[:2], {"a": 10}, workers=2) is None
    assert remaining_seconds(finished, {"a": 10}, workers=2, min_warm=3) is None
    assert remaining_seconds(finished, {"a": 10}, workers=2, min_warm=2) == pytest.approx(10 * 2.0 / 2)


def test_compile_time_is_left_out_and_work_is_shared_by_the_workers():
    # The first replication per (design, worker) took 30 s (compilation), later ones 2 s: the
    # estimate must use 2 s. A rate over all rows would say (30+30+4*2)/6 = 11.3 s each.
    finished = [("a", "w1", 30.0), ("a", "w2", 30.0)] + [("a", w, 2.0) for w in ("w1", "w2", "w1", "w2")]
    assert remaining_seconds(finished, {"a": 20}, workers=2) == pytest.approx(20 * 2.0 / 2)
    assert remaining_seconds(finished, {"a": 20}, workers=4) == pytest.approx(20 * 2.0 / 4)
    # One replication left on two workers takes one replication's time, not half of it.
    assert remaining_seconds(finished, {"a": 1}, workers=2) == pytest.approx(2.0)
    assert remaining_seconds(finished, {"a": 0}, workers=2) == 0.0


def test_each_design_has_its_own_typical_time():
    finished = ([("short", "w1", 20.0), ("short", "w1", 1.0), ("short", "w1", 3.0), ("short", "w1", 2.0)]
                + [("long", "w1", 40.0), ("long", "w1", 10.0), ("long", "w1", 10.0)])
    # medians: short 2 s, long 10 s; a design not started yet takes the median of all warm rows (3 s).
    expected = 5 * 2.0 + 3 * 10.0 + 4 * 3.0
    assert remaining_seconds(finished, {"short": 5, "long": 3, "new": 4}, workers=1) == pytest.approx(expected)


def test_designs_sharing_a_compiled_program_warm_up_once_per_worker():
    finished = [("a", "w1", 30.0), ("b", "w1", 2.0), ("b", "w1", 2.0), ("a", "w1", 2.0)]
    assert remaining_seconds(finished, {"a": 1}, workers=1) is None  # b's first row counted as compiling
    assert remaining_seconds(finished, {"a": 1}, workers=1, shape_of={"a": 1, "b": 1}) == pytest.approx(2.0)


def test_failed_rows_without_a_time_are_ignored():
    finished = [("a", "w1", 30.0), ("a", "w1", None), ("a", "w1", float("nan"))] + [("a", "w1", 4.0)] * 3
    assert remaining_seconds(finished, {"a": 2}, workers=1) == pytest.approx(8.0)


def test_compile_shape_ignores_what_does_not_change_the_program():
    a = Design("a", "sv", TRUTH, 200, 3, Estimator(n_draws=16)).to_dict()
    b = Design("b", "sv", dict(TRUTH, phi=0.9), 200, 9, Estimator(n_draws=16, seed_offset=4, level=0.9)).to_dict()
    assert compile_shape(a) == compile_shape(b)
    assert compile_shape(a) != compile_shape(Design("c", "sv", TRUTH, 500, 3, Estimator(n_draws=16)).to_dict())
    assert compile_shape(a) != compile_shape(Design("d", "sv", TRUTH, 200, 3, Estimator(n_draws=32)).to_dict())


def test_progress_lines_announce_compilation_and_hold_the_estimate_until_it_means_something():
    stream = io.StringIO()
    meter = Progress("p", total=6, already=0, remaining={"a": 4, "b": 2}, workers=1, stream=stream, every=0.0)
    a = Design("a", "sv", TRUTH, 200, 4, Estimator(n_draws=16)).to_dict()
    b = Design("b", "sv", dict(TRUTH, phi=0.9), 200, 2, Estimator(n_draws=16)).to_dict()
    meter.starting(a)
    meter.starting(a)
    meter.starting(b)  # same compiled shape as a: no second announcement
    assert stream.getvalue().count("compiling the estimator for design 'a' (sv, T = 200, 16 draws)") == 1
    assert "design 'b'" not in stream.getvalue()
    times = [("a", 25.0), ("a", 2.0), ("a", 2.0), ("b", 2.0), ("a", 2.0), ("b", 2.0)]
    for design, seconds in times:
        meter.update({"design": design, "status": "ok", "worker": "w1", "elapsed_seconds": seconds})
    lines = stream.getvalue().splitlines()[1:]
    assert len(lines) == 6
    # warm rows: all but row 1 (which compiled the program that 'a' and 'b' share)
    assert all("estimated once 3 replications" in line for line in lines[:3])
    assert "about 4 s left" in lines[3]  # one of a and one of b left, 2 s each, one worker
    assert "about 2 s left" in lines[4]
    assert lines[5].endswith("; done") and "left" not in lines[5]
