"""Small vectorised helpers: boolean masks to intervals, hysteresis, merging, time labels."""

from __future__ import annotations

from collections.abc import Callable
from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd

from ..intervals import runs


def mask_runs(mask: np.ndarray) -> np.ndarray:
    """Index pairs ``[[i0, i1], ...]`` (inclusive) of the runs of True in a boolean mask."""
    starts, ends = runs(mask)
    return np.column_stack((starts, ends)).astype(np.int64)


def merge_runs(runs: np.ndarray, time: np.ndarray, max_gap_s: float) -> np.ndarray:
    """Merge index runs whose time gap (end of one to start of the next) is below ``max_gap_s``."""
    if len(runs) <= 1:
        return runs
    gaps = time[runs[1:, 0]] - time[runs[:-1, 1]]
    new_group = np.concatenate(([True], gaps >= max_gap_s))
    gid = np.cumsum(new_group) - 1
    starts = pd.Series(runs[:, 0]).groupby(gid).min().to_numpy()
    ends = pd.Series(runs[:, 1]).groupby(gid).max().to_numpy()
    return np.column_stack((starts, ends)).astype(np.int64)


def hysteresis(value: np.ndarray, enter: float, release: float) -> np.ndarray:
    """Latched mask: True from where ``value > enter`` until ``value < release`` (release < enter).

    NaN samples keep the current state. Vectorised with a forward fill of the set/reset events.
    """
    v = np.asarray(value, dtype=float)
    events = np.full(v.shape, np.nan)
    with np.errstate(invalid="ignore"):
        events[v < release] = 0.0
        events[v > enter] = 1.0
    return pd.Series(events).ffill().fillna(0.0).to_numpy() > 0.5


def format_elapsed(seconds: float) -> str:
    """``hh:mm`` of elapsed time since the start of the run."""
    if not np.isfinite(seconds):
        return "--:--"
    minutes = int(round(seconds / 60.0))
    return f"{minutes // 60:02d}:{minutes % 60:02d}"


def make_clock(start: datetime | None) -> Callable[[float], str]:
    """Time labels for messages: ``03:25 UTC`` when the run's start is known, else the
    elapsed ``hh:mm`` of :func:`format_elapsed`."""
    if start is None:
        return format_elapsed

    def clock(seconds: float) -> str:
        if not np.isfinite(seconds):
            return "--:--"
        when = start.astimezone(UTC) + timedelta(seconds=float(seconds))
        return when.strftime("%H:%M UTC")

    return clock


def median_step(time: np.ndarray) -> float:
    """Median positive sample step of a time column [s] (1.0 when it cannot be told)."""
    dt = np.diff(np.asarray(time, dtype=float))
    dt = dt[np.isfinite(dt) & (dt > 0)]
    return float(np.median(dt)) if dt.size else 1.0
