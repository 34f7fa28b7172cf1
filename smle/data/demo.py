"""An invented demo scenario: simulated prices of a fictional instrument on a fictional venue.

DEMO DATA ONLY, NOT REAL DATA. The "Marrowby Barley Composite", quoted on the "Quillhaven
Commodity Exchange", do not exist; the prices are simulated with NumPy from an explicit seed
(the same seed gives the same files, byte for byte) and the dates lie in the 2030s so that
nobody takes them for history.

The model (percent log prices, day ``t``, intraday step ``k``):

* daily log-variance ``h_t = mu + phi (h_{t-1} - mu) + sigma_eta eta_t``, a Gaussian AR(1)
  (stochastic volatility), started from its stationary law;
* a persistent mixing factor ``m_t`` in ``{1, mixing_high}``, a two-state Markov chain that
  stays put with probability ``mixing_stay`` per day (calm and agitated spells);
* the day's variance ``v_t = exp(h_t) m_t`` (percent squared), of which ``overnight_share``
  falls in the gap from the previous close to the open and the rest over the session;
* within the session a driftless diffusion, Gaussian steps of ``step_seconds`` whose variance
  follows a U-shaped intraday pattern (busier near the open and the close);
* 1-minute bars (open, high, low, close of the steps) stamped at their end, and daily bars.
"""

from __future__ import annotations

from pathlib import Path
from typing import NamedTuple

import numpy as np
import pandas as pd

from smle.errors import SmleInputError, describe

INSTRUMENT = "Marrowby Barley Composite"
VENUE = "Quillhaven Commodity Exchange"
DISCLAIMER = (f"DEMO DATA ONLY: '{INSTRUMENT}' on the '{VENUE}' are invented; these prices "
              f"are simulated by smle.data.demo and are not real data.")

VENUE_TIMEZONE = "Europe/London"
SESSION_OPEN = "09:00"
SESSION_CLOSE = "15:30"
FIRST_DAY = "2031-01-06"


class DemoScenario(NamedTuple):
    """What :func:`demo_scenario` returns.

    Attributes:
      intraday: 1-minute bars, index ``timestamp`` (aware, venue time, bar end), columns
        ``open``, ``high``, ``low``, ``close``.
      daily: daily bars, index ``date``, columns ``open``, ``high``, ``low``, ``close``.
      truth: per day the latent values: ``log_variance`` (h_t), ``mixing`` (m_t),
        ``session_integrated_variance_pct2`` (the sum of the step variances) and
        ``overnight_variance_pct2``.
      settings: the venue, session, time zone, seed and model parameters, and the disclaimer.
      files: paths written (empty when no folder was given).
    """

    intraday: pd.DataFrame
    daily: pd.DataFrame
    truth: pd.DataFrame
    settings: dict
    files: dict


def _intraday_pattern(n_steps: int, strength: float) -> np.ndarray:
    """U-shaped weights over the session steps, summing to one."""
    middle = (np.arange(n_steps) + 0.5) / n_steps
    weights = 1.0 + strength * (2.0 * middle - 1.0) ** 2
    return weights / weights.sum()


def _check_arguments(**values) -> None:
    """Each argument of :func:`demo_scenario` in its accepted range, or a clear error."""
    integers = {"seed": (0, "a non-negative integer"), "n_days": (1, "a positive integer"),
                "step_seconds": (1, "a positive integer"),
                "bar_minutes": (1, "a positive integer")}
    for name, (lowest, accepted) in integers.items():
        value = values[name]
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < lowest:
            raise SmleInputError(f"{name}={describe(value)} is not accepted; use {accepted}")
    ranges = {"mu": (-np.inf, np.inf, "a finite number"),
              "phi": (-1.0, 1.0, "-1 < phi < 1"),
              "sigma_eta": (0.0, np.inf, "sigma_eta > 0"),
              "mixing_high": (0.0, np.inf, "mixing_high > 0"),
              "mixing_stay": (0.0, 1.0, "0 <= mixing_stay <= 1 (a probability)"),
              "overnight_share": (0.0, 1.0, "0 <= overnight_share < 1"),
              "start_price": (0.0, np.inf, "start_price > 0")}
    inclusive = {"mixing_stay": (True, True), "overnight_share": (True, False)}
    for name, (low, high, accepted) in ranges.items():
        value = values[name]
        try:
            number = float(value)
        except (TypeError, ValueError):
            number = np.nan
        closed_low, closed_high = inclusive.get(name, (False, False))
        above = number >= low if closed_low else number > low
        below = number <= high if closed_high else number < high
        if isinstance(value, bool) or not (np.isfinite(number) and above and below):
            raise SmleInputError(f"{name}={describe(value)} is not accepted; use {accepted}")


def demo_scenario(seed: int, n_days: int = 250, folder=None, *, mu: float = 0.0,
                  phi: float = 0.97, sigma_eta: float = 0.15, mixing_high: float = 2.0,
                  mixing_stay: float = 0.985, overnight_share: float = 0.2,
                  step_seconds: int = 10, bar_minutes: int = 1,
                  start_price: float = 412.5) -> DemoScenario:
    """Simulate the invented demo scenario (see the module docstring); optionally write it.

    Args:
      seed: seed of the NumPy generator; the scenario is a deterministic function of it.
      n_days: number of session days (business days from 2031-01-06).
      folder: when given, the CSV files are written there (created if needed).
      mu, phi, sigma_eta: the AR(1) of the daily log-variance (percent squared).
      mixing_high, mixing_stay: the agitated level of the mixing factor and the daily
        probability of staying in the current state.
      overnight_share: the share of each day's variance falling overnight.
      step_seconds: the simulation step within the session; must divide the bar length.
      bar_minutes: the bar length in minutes.
      start_price: the first open.

    Returns:
      A :class:`DemoScenario`.
    """
    _check_arguments(seed=seed, n_days=n_days, mu=mu, phi=phi, sigma_eta=sigma_eta,
                     mixing_high=mixing_high, mixing_stay=mixing_stay,
                     overnight_share=overnight_share, step_seconds=step_seconds,
                     bar_minutes=bar_minutes, start_price=start_price)
    rng = np.random.default_rng(seed)
    open_minutes = 9 * 60
    session_minutes = 6 * 60 + 30
    steps_per_bar = bar_minutes * 60 // step_seconds
    if steps_per_bar * step_seconds != bar_minutes * 60 or session_minutes % bar_minutes:
        raise SmleInputError(
            f"step_seconds={step_seconds!r} and bar_minutes={bar_minutes!r} are not accepted "
            f"together: step_seconds must divide the bar ({bar_minutes * 60} s), and "
            f"bar_minutes the 390-minute session (1, 2, 3, 5, 6, 10, 13, 15, 26, 30, ...)")
    n_bars = session_minutes // bar_minutes
    n_steps = n_bars * steps_per_bar

    # Latent daily variance: AR(1) log-variance times a two-state persistent mixing factor.
    log_variance = np.empty(n_days)
    log_variance[0] = mu + sigma_eta / np.sqrt(1.0 - phi**2) * rng.standard_normal()
    shocks = sigma_eta * rng.standard_normal(n_days)
    for t in range(1, n_days):  # a loop over days for the recursion, not over rows
        log_variance[t] = mu + phi * (log_variance[t - 1] - mu) + shocks[t]
    switches = rng.random(n_days) > mixing_stay
    state = np.cumsum(switches) % 2
    mixing = np.where(state == 1, mixing_high, 1.0)
    variance = np.exp(log_variance) * mixing

    session_variance = (1.0 - overnight_share) * variance
    overnight_variance = overnight_share * variance
    step_variance = session_variance[:, None] * _intraday_pattern(n_steps, 0.8)[None, :]
    steps = np.sqrt(step_variance) / 100.0 * rng.standard_normal((n_days, n_steps))
    gaps = np.sqrt(overnight_variance) / 100.0 * rng.standard_normal(n_days)
    gaps[0] = 0.0
    session_moves = steps.sum(axis=1)
    day_open = np.log(start_price) + np.cumsum(gaps + np.r_[0.0, session_moves[:-1]])
    path = day_open[:, None] + np.concatenate(
        [np.zeros((n_days, 1)), np.cumsum(steps, axis=1)], axis=1)

    # Bars: bar j spans steps j*s .. (j+1)*s of the path (its first point is the last bar's end).
    body = path[:, 1:].reshape(n_days, n_bars, steps_per_bar)
    bar_open = path[:, :-1:steps_per_bar]
    bar_close = body[:, :, -1]
    bar_high = np.maximum(body.max(axis=2), bar_open)
    bar_low = np.minimum(body.min(axis=2), bar_open)

    days = pd.bdate_range(FIRST_DAY, periods=n_days)
    minutes = open_minutes + bar_minutes * (np.arange(n_bars) + 1)
    wall = (days.as_unit("ns").asi8[:, None] + minutes[None, :] * 60 * 10**9).ravel()
    stamps = pd.DatetimeIndex(wall.astype("datetime64[ns]")).tz_localize(VENUE_TIMEZONE).rename("timestamp")
    intraday = pd.DataFrame({"open": np.exp(bar_open).ravel(), "high": np.exp(bar_high).ravel(),
                             "low": np.exp(bar_low).ravel(), "close": np.exp(bar_close).ravel()},
                            index=stamps).round(4)
    daily = pd.DataFrame({"open": np.exp(path[:, 0]), "high": np.exp(path.max(axis=1)),
                          "low": np.exp(path.min(axis=1)), "close": np.exp(path[:, -1])},
                         index=days.rename("date")).round(4)
    # Rounding to 4 decimals could push a bar's open or close a hair outside its range.
    for frame in (intraday, daily):
        frame["high"] = frame[["open", "high", "low", "close"]].max(axis=1)
        frame["low"] = frame[["open", "high", "low", "close"]].min(axis=1)
    truth = pd.DataFrame({"log_variance": log_variance, "mixing": mixing,
                          "session_integrated_variance_pct2": step_variance.sum(axis=1),
                          "overnight_variance_pct2": overnight_variance},
                         index=days.rename("date"))
    settings = {"instrument": INSTRUMENT, "venue": VENUE, "timezone": VENUE_TIMEZONE,
                "session_open": SESSION_OPEN, "session_close": SESSION_CLOSE,
                "bar_minutes": bar_minutes, "step_seconds": step_seconds, "seed": seed,
                "n_days": n_days, "mu": mu, "phi": phi, "sigma_eta": sigma_eta,
                "mixing_high": mixing_high, "mixing_stay": mixing_stay,
                "overnight_share": overnight_share, "disclaimer": DISCLAIMER}
    files = {}
    if folder is not None:
        files = _write(Path(folder), intraday, daily, settings)
    return DemoScenario(intraday, daily, truth, settings, files)


def _write(folder: Path, intraday: pd.DataFrame, daily: pd.DataFrame, settings: dict) -> dict:
    folder.mkdir(parents=True, exist_ok=True)
    files = {"intraday": folder / "quillhaven_marrowby_demo_1min.csv",
             "daily": folder / "quillhaven_marrowby_demo_daily.csv",
             "about": folder / "quillhaven_marrowby_demo_ABOUT.txt"}
    # Timestamps written as venue time with its offset, formatted with NumPy (fast).
    written = intraday.copy()
    wall = written.index.tz_localize(None).as_unit("s").to_numpy()
    offset = (wall - written.index.tz_convert("UTC").tz_localize(None).as_unit("s").to_numpy())
    minutes = offset.astype("timedelta64[m]").astype(int)
    sign = np.where(minutes < 0, "-", "+")
    hours, rest = np.divmod(np.abs(minutes), 60)
    text = np.char.replace(np.datetime_as_string(wall, unit="s"), "T", " ")
    zone = np.char.add(np.char.add(sign, np.char.zfill(hours.astype(str), 2)),
                       np.char.add(":", np.char.zfill(rest.astype(str), 2)))
    written.index = pd.Index(np.char.add(text, zone), name="timestamp")
    written.to_csv(files["intraday"])
    daily.to_csv(files["daily"], date_format="%Y-%m-%d")
    lines = [DISCLAIMER, ""] + [f"{key}: {value}" for key, value in settings.items()
                                if key != "disclaimer"]
    lines += ["", "Files: 1-minute bars stamped at the bar's end (venue time with offset);",
              "daily bars. Prepare them with smle.data.prepare_file(path, timezone=...,",
              f"session_open='{SESSION_OPEN}', session_close='{SESSION_CLOSE}')."]
    files["about"].write_text("\n".join(lines) + "\n", encoding="utf-8")
    return files
