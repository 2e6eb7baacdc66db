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


def gap_flags(
    time: ArrayLike,
    columns: dict[str, ArrayLike],
    *,
    gap_factor: float = 3.0,
    min_samples: int = 3,
) -> list[dict[str, object]]:
    """``data_gap`` flag rows for runs of missing values and for holes in the time base.

    A run of NaN in a channel is flagged from the last good sample before it to the first good
    one after it (the span with no data); runs that hit several channels over the same span
    become one flag whose ``suspect`` lists them, ``|``-separated. A step in time larger than
    ``gap_factor`` times the median step is a gap of the logger itself (suspect ``time``).
    Runs shorter than ``min_samples`` are not flagged here (single bad cells are counted and
    reported by ingest).
    """
    t = np.asarray(time, dtype=float)
    n = t.size
    spans: dict[tuple[int, int], list[str]] = {}
    for name, values in columns.items():
        s, e = runs(~np.isfinite(np.asarray(values, dtype=float)))
        if s.size == n and n:  # channel entirely empty: reported by ingest, not as a gap
            continue
        long_enough = (e - s + 1) >= min_samples
        for a, b in zip(s[long_enough], e[long_enough], strict=True):
            if a == 0 and b == n - 1:
                continue
            spans.setdefault((int(a), int(b)), []).append(name)
    rows: list[dict[str, object]] = []
    for (a, b), names in sorted(spans.items()):
        t0 = t[a - 1] if a > 0 else t[a]
        t1 = t[b + 1] if b + 1 < n else t[b]
        rows.append(
            {
                "start_s": float(t0),
                "end_s": float(t1),
                "check": "data_gap",
                "suspect": "|".join(names),
                "severity": "warning",
                "value": float(t1 - t0),
                "message": f"No data from {', '.join(names)} for {b - a + 1} samples "
                f"({t1 - t0:.1f} s).",
            }
        )
    if n > 2:
        dt = np.diff(t)
        step = float(np.median(dt))
        for i in np.flatnonzero(dt > gap_factor * step):
            rows.append(
                {
                    "start_s": float(t[i]),
                    "end_s": float(t[i + 1]),
                    "check": "data_gap",
                    "suspect": "time",
                    "severity": "warning",
                    "value": float(dt[i]),
                    "message": f"The log has no rows for {dt[i]:.1f} s "
                    f"(usual step {step:g} s).",
                }
            )
    return rows


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
