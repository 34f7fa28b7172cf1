"""Realized variance and bipower variation on simulated paths with known integrated variance.

Each day's log price (percent) is a driftless diffusion observed every 2 seconds over a
6.5-hour session, with a volatility that varies across days and follows a U shape within the
day, constant within each 2-second step. The day's integrated variance IV is then the sum of
the step variances, and over a grid interval j the squared return is IV_j times a chi-square(1)
variable, so RV - IV has mean 0 and variance exactly 2 sum_j IV_j^2 (Andersen, Bollerslev,
Diebold and Labys 2001; Barndorff-Nielsen and Shephard 2002 for the asymptotics).
"""

import numpy as np
import pandas as pd
import pytest

from smle.data import prepare_daily
from smle.data import realized

SESSION = 23_400  # seconds, 09:30 to 16:00
STEP = 2
N_STEPS = SESSION // STEP
N_DAYS = 120


def _simulate(seed, jump_scale=0.0):
    """Log prices (percent) at every step and per-step variances, shape (N_DAYS, N_STEPS)."""
    rng = np.random.default_rng(seed)
    level = np.exp(0.4 * rng.standard_normal(N_DAYS))  # daily variance, percent squared
    middle = (np.arange(N_STEPS) + 0.5) / N_STEPS
    pattern = 1.0 + 1.5 * (2 * middle - 1) ** 2
    step_variance = level[:, None] * pattern[None, :] / pattern.sum()
    steps = np.sqrt(step_variance) * rng.standard_normal((N_DAYS, N_STEPS))
    jumps = np.zeros(N_DAYS)
    if jump_scale:
        # One jump a day at a random step, of size jump_scale * sqrt(IV) and random sign.
        where = rng.integers(0, N_STEPS, N_DAYS)
        jumps = jump_scale * np.sqrt(step_variance.sum(axis=1)) * rng.choice([-1, 1], N_DAYS)
        steps[np.arange(N_DAYS), where] += jumps
    log_price = 100.0 * np.log(50.0) + np.concatenate(
        [np.zeros((N_DAYS, 1)), np.cumsum(steps, axis=1)], axis=1)
    return log_price, step_variance, jumps


def _measures(log_price, interval):
    """Realized variance and bipower variation through smle's grid sampling."""
    day = np.repeat(np.arange(N_DAYS), N_STEPS)
    seconds = np.tile(STEP * np.arange(1, N_STEPS + 1, dtype=float), N_DAYS)
    returns = realized.grid_returns(day, seconds, log_price[:, 1:].ravel(), log_price[:, 0],
                                    SESSION, interval, scale=1.0)
    return realized.realized_variance(returns), realized.bipower_variation(returns)


@pytest.fixture(scope="module")
def smooth():
    return _simulate(seed=11)


@pytest.mark.parametrize("interval", [1800, 300, 60, 10])
def test_realized_variance_error_has_its_exact_law(smooth, interval):
    # Standardised errors (RV - IV) / sqrt(2 sum_j IV_j^2) have mean 0 and variance 1; over
    # 120 days the sample mean has sd 1/sqrt(120) = 0.091 and the sample variance sd about
    # sqrt(2/120) * (1 + kurtosis excess) ~ 0.2 at coarse grids: tolerances 4 sd (0.37) for
    # the mean and 0.6 for the variance. A misaligned grid (an interval lost or counted twice)
    # moves the mean by many sd.
    log_price, step_variance, _ = smooth
    rv, _ = _measures(log_price, interval)
    per_interval = step_variance.reshape(N_DAYS, -1, interval // STEP).sum(axis=2)
    iv = step_variance.sum(axis=1)
    z = (rv - iv) / np.sqrt(2.0 * (per_interval**2).sum(axis=1))
    assert abs(z.mean()) < 4 / np.sqrt(N_DAYS), z.mean()
    assert abs(z.var() - 1.0) < 0.6, z.var()


def test_realized_variance_converges_as_interval_shrinks(smooth):
    # The root-mean-square relative error falls like sqrt(interval) (ABDL 2001): measured
    # 0.40, 0.16, 0.071, 0.033 at 30 min, 5 min, 1 min, 10 s.
    log_price, step_variance, _ = smooth
    iv = step_variance.sum(axis=1)
    errors = []
    for interval in (1800, 300, 60, 10):
        rv, _ = _measures(log_price, interval)
        errors.append(np.sqrt(np.mean(((rv - iv) / iv) ** 2)))
    assert all(later < earlier for earlier, later in zip(errors, errors[1:])), errors
    # Theory: sqrt(2 * 1.09 * interval / session), 1.09 = mean(pattern^2) / mean(pattern)^2
    # for the U shape: 0.030 at 10 s.
    assert errors[-1] < 0.04, errors


def test_bipower_variation_ignores_jumps_realized_variance_does_not():
    # Barndorff-Nielsen and Shephard (2004): RV -> IV + sum of squared jumps, BV -> IV. With
    # one jump a day of size sqrt(IV), RV overshoots IV by 100 % on average; BV's bias from
    # the jump is about sqrt(2 pi / M) (the jump enters two products |J||r|), i.e. 0.05 at
    # 10 s (M = 2340) and 0.13 at 1 min, plus Monte Carlo error of about 0.01.
    log_price, step_variance, jumps = _simulate(seed=12, jump_scale=1.0)
    iv = step_variance.sum(axis=1)
    bias_bv, bias_rv = [], []
    for interval in (300, 60, 10):
        rv, bv = _measures(log_price, interval)
        bias_rv.append(np.mean((rv - iv) / iv))
        bias_bv.append(np.mean((bv - iv) / iv))
        # RV tracks IV + J^2 instead.
        assert abs(np.mean((rv - iv - jumps**2) / iv)) < 0.05
    assert all(b > 0.8 for b in bias_rv), bias_rv
    assert abs(bias_bv[-1]) < 0.09, bias_bv
    assert abs(bias_bv[-1]) < abs(bias_bv[0]), bias_bv


def test_bipower_variation_is_unbiased_without_jumps(smooth):
    # BN-S (2004) with the M/(M-1) factor: mean relative bias within 4 standard errors
    # (about 0.013 at 10 s over 120 days, so a 3 % error in the pi/2 scaling would fail).
    log_price, step_variance, _ = smooth
    iv = step_variance.sum(axis=1)
    _, bv = _measures(log_price, 10)
    relative = (bv - iv) / iv
    assert abs(relative.mean()) < 4 * relative.std() / np.sqrt(N_DAYS), relative.mean()


def test_subsampled_realized_variance_is_closer_than_one_grid(smooth):
    # Averaging 5 shifted 5-minute grids (Zhang, Mykland and Ait-Sahalia 2005) reduces the
    # error variance of the 5-minute RV without changing its mean (no noise here).
    log_price, step_variance, _ = smooth
    iv = step_variance.sum(axis=1)
    day = np.repeat(np.arange(N_DAYS), N_STEPS)
    seconds = np.tile(STEP * np.arange(1, N_STEPS + 1, dtype=float), N_DAYS)
    averaged = realized.subsampled_realized_variance(
        day, seconds, log_price[:, 1:].ravel(), log_price[:, 0], SESSION, 300, 5, scale=1.0)
    single, _ = _measures(log_price, 300)
    assert np.mean((averaged - iv) ** 2) < 0.8 * np.mean((single - iv) ** 2)
    relative = (averaged - iv) / iv
    assert abs(relative.mean()) < 4 * relative.std() / np.sqrt(N_DAYS)


def test_prepare_daily_matches_direct_sums_across_a_clock_change():
    # The whole pipeline on a frame stamped in UTC for a venue in Europe/London over the March
    # 2031 clock change: the 09:30-16:00 session moves by an hour in UTC, and the 5-minute RV
    # must equal the sum of squared 5-minute returns computed here directly.
    rng = np.random.default_rng(5)
    days = pd.bdate_range("2031-03-24", periods=6)
    offsets = np.arange(0, SESSION + 1, 10)  # every 10 s from the open to the close
    frames, direct = [], []
    price = 100.0
    for day in days:
        local = day + pd.Timedelta(hours=9, minutes=30) + pd.to_timedelta(offsets, unit="s")
        stamps = local.tz_localize("Europe/London").tz_convert("UTC")
        gap = 0.3 * rng.standard_normal()
        log_path = np.log(price) + gap / 100 + np.cumsum(
            np.r_[0.0, 0.02 * rng.standard_normal(len(offsets) - 1)]) / 100
        frames.append(pd.DataFrame({"time": stamps, "price": np.exp(log_path)}))
        five = 100 * np.diff(log_path[::30])
        direct.append(np.sum(five**2))
        price = np.exp(log_path[-1])
    frame = pd.concat(frames, ignore_index=True)
    table = prepare_daily(frame, "5min", timezone="Europe/London", session_open="09:30",
                          session_close="16:00", measures=("realized_variance",))
    assert list(table.index) == list(days[1:])
    assert np.allclose(table["realized_variance_pct2"], direct[1:], rtol=1e-9)
    assert (table["n_observations"] == len(offsets)).all()
    assert table.attrs["n_outside_session"] == 0
