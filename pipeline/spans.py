"""Boolean masks over a time base <-> lists of intervals, and statistics per group of
samples (vectorised)."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray


def runs(mask: ArrayLike) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    """Start and end indices (inclusive) of the runs of True in a 1-D mask."""
    m = np.asarray(mask, dtype=bool)
    if m.size == 0:
        return np.empty(0, np.intp), np.empty(0, np.intp)
    edges = np.diff(np.concatenate(([0], m.view(np.int8), [0])))
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1) - 1
    return starts, ends


def mask_to_intervals(
    time: ArrayLike, mask: ArrayLike, *, min_duration_s: float = 0.0, merge_gap_s: float = 0.0
) -> list[tuple[float, float, int, int]]:
    """Intervals (start_s, end_s, first index, last index) where ``mask`` is True.

    Runs closer than ``merge_gap_s`` are merged; runs shorter than ``min_duration_s`` (from the
    first to the last flagged sample) are dropped after merging.
    """
    t = np.asarray(time, dtype=float)
    s, e = runs(mask)
    if s.size == 0:
        return []
    if merge_gap_s > 0 and s.size > 1:
        keep = (t[s[1:]] - t[e[:-1]]) > merge_gap_s
        s = np.concatenate(([s[0]], s[1:][keep]))
        e = np.concatenate((e[:-1][keep], [e[-1]]))
    dur = t[e] - t[s]
    ok = dur >= min_duration_s
    return [(float(t[a]), float(t[b]), int(a), int(b)) for a, b in zip(s[ok], e[ok], strict=True)]


def group_mean_std(
    group: np.ndarray, use: np.ndarray, values: np.ndarray, k: int
) -> tuple[np.ndarray, np.ndarray]:
    """Mean and sample standard deviation (ddof 1) of ``values[use]`` per group id 0..k-1,
    two-pass (deviations from the group mean, so long steady points lose no precision); NaN
    for a group with no sample (mean) or fewer than two (std)."""
    g = group[use]
    x = values[use]
    count = np.bincount(g, minlength=k).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.bincount(g, weights=x, minlength=k) / count
        ss = np.bincount(g, weights=(x - mean[g]) ** 2, minlength=k)
        std = np.sqrt(ss / (count - 1.0))
    std[count < 2] = np.nan
    return mean, std


def sample_seconds(time: np.ndarray) -> np.ndarray:
    """Seconds each sample stands for: the step to the next sample, capped at three typical
    steps so a hole in the log is not integrated over."""
    t = np.asarray(time, float)
    if t.size < 2:
        return np.ones_like(t)
    step = float(np.median(np.diff(t)))
    dt = np.diff(t, append=t[-1] + step)
    return np.clip(dt, 0.0, 3.0 * step)
