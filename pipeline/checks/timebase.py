"""Small vectorised helpers: boolean masks to intervals, hysteresis, merging, time labels."""

from __future__ import annotations

from collections.abc import Callable
from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd

from ..spans import runs


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
    """Time labels for messages: ``03:25 UTC`` (rounded to the nearest minute, as
    :func:`format_elapsed`) when the run's start is known, else the elapsed ``hh:mm``."""
    if start is None:
        return format_elapsed

    def clock(seconds: float) -> str:
        if not np.isfinite(seconds):
            return "--:--"
        when = start.astimezone(UTC) + timedelta(minutes=round(float(seconds) / 60.0))
        return when.strftime("%H:%M UTC")

    return clock


def describe_time(start: datetime | None, seconds: float, *, with_elapsed: bool = True) -> str:
    """A time of the night as text, one rounding rule everywhere (:func:`make_clock`):
    ``03:25 UTC (4.2 h into the run)`` (``03:25 UTC`` without ``with_elapsed``), or
    ``4.2 h into the run`` when the start is unknown."""
    if not np.isfinite(seconds):
        return "unknown time"
    hours = f"{seconds / 3600.0:.1f} h into the run"
    if start is None:
        return hours
    text = make_clock(start)(seconds)
    return f"{text} ({hours})" if with_elapsed else text


def window_counts(mask: np.ndarray, n: int) -> np.ndarray:
    """Number of True samples in the centred window of ``n`` samples around each sample.

    The windows are those of ``pd.Series.rolling(n, center=True)``: samples
    ``i + (n - 1) // 2 + 1 - n`` to ``i + (n - 1) // 2``, cut at both ends of the array.
    """
    m = np.asarray(mask, dtype=bool)
    size = m.size
    csum = np.concatenate(([0], np.cumsum(m, dtype=np.int64)))
    end = np.arange(size, dtype=np.int64) + (n - 1) // 2 + 1
    start = np.clip(end - n, 0, size)
    return csum[np.minimum(end, size)] - csum[start]


def median_may_reach(
    x: np.ndarray, n: int, min_periods: int, low: float, high: float
) -> np.ndarray:
    """Samples whose centred rolling median (window ``n``) may be ``<= low`` or ``>= high``.

    A cheap, exact pre-test for :func:`rolling_median_at`: the median of the k valid values in
    a window is ``>= high`` only if at least k/2 of them are ``>= high`` (for an even k the
    median is the mean of the two middle values, and rounding is monotonic), and likewise for
    ``<= low``. Samples with fewer than ``min_periods`` valid values (median NaN) are False.
    Valid means finite: pandas' rolling functions treat infinities as missing.
    """
    x = np.asarray(x, dtype=float)
    valid = np.isfinite(x)
    k = window_counts(valid, n)
    with np.errstate(invalid="ignore"):
        n_low = window_counts(valid & (x <= low), n)
        n_high = window_counts(valid & (x >= high), n)
    return (k >= max(1, min_periods)) & ((2 * n_low >= k) | (2 * n_high >= k))


def rolling_median_at(
    x: np.ndarray, n: int, min_periods: int, where: np.ndarray
) -> np.ndarray:
    """``pd.Series(x).rolling(n, min_periods=min_periods, center=True).median()`` at the samples
    in ``where``, NaN elsewhere.

    The same pandas routine runs on stretches of ``x`` that hold every window needed (the
    samples asked for plus ``n`` on each side), so the values are bit-identical to the
    rolling median of the whole array, at a fraction of the cost when few samples are asked.
    """
    x = np.asarray(x, dtype=float)
    out = np.full(x.size, np.nan)
    runs = mask_runs(where)
    if not len(runs):
        return out
    # one pandas call per group of runs whose context windows would overlap
    new = np.concatenate(([True], runs[1:, 0] - runs[:-1, 1] > 2 * n))
    last = np.concatenate((new[1:], [True]))
    for i0, i1 in zip(runs[new, 0], runs[last, 1], strict=True):
        lo, hi = max(0, i0 - n), min(x.size, i1 + n + 1)
        med = pd.Series(x[lo:hi]).rolling(n, min_periods=min_periods, center=True).median()
        out[i0 : i1 + 1] = med.to_numpy()[i0 - lo : i1 - lo + 1]
    return np.where(where, out, np.nan)


def median_step(time: np.ndarray) -> float:
    """Median positive sample step of a time column [s] (1.0 when it cannot be told)."""
    dt = np.diff(np.asarray(time, dtype=float))
    dt = dt[np.isfinite(dt) & (dt > 0)]
    return float(np.median(dt)) if dt.size else 1.0
