"""Steady operating points: where the engine holds speed, torque and fuel flow.

A sample is steady when, over the trailing ``steady_window_s``, the standard deviation of each
of speed, torque and fuel mass flow stays below its relative limit (``steady_*_rel`` times the
local mean, the mean floored at ``steady_floor_fraction`` of the night's 99th percentile).
The first ``steady_settle_s`` of each steady stretch is dropped (thermal and analyzer
settling) and stretches shorter than ``steady_min_duration_s`` are discarded. All limits are
relative, so the result does not change when a channel is scaled (another unit). Common
practice: the steady-state criteria of engine mapping, with no published numbers behind them.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from ..spans import group_mean_std
from .timebase import mask_runs, median_step

#: Quantity -> settings key of its relative standard-deviation limit.
STEADY_QUANTITIES = {
    "speed": "steady_speed_rel",
    "torque": "steady_torque_rel",
    "fuel_mass_flow": "steady_fuel_rel",
}


def rolling_mean_std(
    time: np.ndarray, x: np.ndarray, window_s: float
) -> tuple[np.ndarray, np.ndarray]:
    """Trailing time-window mean and standard deviation (N-1) of ``x``.

    Uses a time-based window when ``time`` increases strictly, else a window of
    ``window_s / median step`` samples. At least half the expected samples are required.
    """
    step = median_step(time)
    n_expected = max(2, int(round(window_s / step)))
    s = pd.Series(np.asarray(x, dtype=float))
    min_periods = max(2, n_expected // 2)
    if np.all(np.diff(time) > 0):
        s.index = pd.to_timedelta(np.asarray(time, dtype=float), unit="s")
        r = s.rolling(pd.Timedelta(seconds=window_s), min_periods=min_periods)
    else:
        r = s.rolling(n_expected, min_periods=min_periods)
    return r.mean().to_numpy(), r.std().to_numpy()


def steady_mask(
    frame: pd.DataFrame, settings: Mapping[str, Any], running: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Steady mask (bool per row) and steady intervals as inclusive row-index pairs; only
    samples where the engine is ``running`` (when given) can be steady: a stopped engine
    holds speed and torque perfectly still."""
    time = frame["time"].to_numpy(dtype=float)
    n = len(time)
    raw = np.ones(n, dtype=bool) if running is None else np.asarray(running, dtype=bool).copy()
    used = 0
    for name, key in STEADY_QUANTITIES.items():
        if name not in frame:
            continue
        x = frame[name].to_numpy(dtype=float)
        if not np.isfinite(x).any():
            continue
        used += 1
        mean, std = rolling_mean_std(time, x, settings["steady_window_s"])
        scale = np.nanpercentile(np.abs(x), 99)
        floor = settings["steady_floor_fraction"] * scale
        limit = settings[key] * np.maximum(np.abs(mean), floor)
        with np.errstate(invalid="ignore"):
            raw &= std <= limit
    if used == 0 or n == 0:
        return np.zeros(n, dtype=bool), np.empty((0, 2), dtype=np.int64)
    runs = mask_runs(raw)
    # settling: drop the first steady_settle_s of each run
    settled = np.zeros(n, dtype=bool)
    run_start_time = np.full(n, np.nan)
    for i0, i1 in runs:  # one iteration per steady stretch (a few hundred at most)
        run_start_time[i0 : i1 + 1] = time[i0]
    with np.errstate(invalid="ignore"):
        settled = raw & (time - run_start_time >= settings["steady_settle_s"])
    runs = mask_runs(settled)
    if len(runs):
        dur = time[runs[:, 1]] - time[runs[:, 0]]
        runs = runs[dur >= settings["steady_min_duration_s"]]
    mask = np.zeros(n, dtype=bool)
    for i0, i1 in runs:
        mask[i0 : i1 + 1] = True
    return mask, runs


def steady_points_table(
    time: np.ndarray, runs: np.ndarray, columns: dict[str, np.ndarray], judged: np.ndarray
) -> pd.DataFrame:
    """One row per steady point: start_s, end_s, samples, and ``<name>_mean`` / ``<name>_std``.

    Means and standard deviations are taken over the point's judged samples (analyzers
    sampling, estimates valid); NaNs are ignored.
    """
    n = len(time)
    pid = np.full(n, -1, dtype=np.int64)
    for k, (i0, i1) in enumerate(runs):
        pid[i0 : i1 + 1] = k
    out = pd.DataFrame(
        {
            "start_s": time[runs[:, 0]] if len(runs) else np.empty(0),
            "end_s": time[runs[:, 1]] if len(runs) else np.empty(0),
        }
    )
    sel = (pid >= 0) & judged
    out["samples"] = np.bincount(pid[sel], minlength=len(runs)).astype(np.int64)
    if not len(runs):
        for name in columns:
            out[f"{name}_mean"] = np.empty(0)
            out[f"{name}_std"] = np.empty(0)
        return out
    k = len(runs)
    for name, values in columns.items():
        out[f"{name}_mean"], out[f"{name}_std"] = group_mean_std(
            pid, sel & np.isfinite(values), np.asarray(values, dtype=float), k
        )
    return out
