"""Absolute disagreement: a residual beyond its tolerance for longer than a minimum time.

Judged on steady samples only (transients are shown, not judged). Each residual is smoothed
by a rolling median of ``disagreement_smooth_s``; a disagreement starts where |residual|
exceeds the tolerance and ends only where it falls below ``disagreement_release_fraction`` of
it (hysteresis), so noise near the limit does not give slivers. Stretches closer than
``disagreement_merge_gap_s`` are merged; stretches whose judged time is shorter than
``disagreement_min_duration_s`` are dropped. Overlapping stretches of different residuals form
one event, attributed to an instrument from the median residuals inside it. Common practice
(no published limit for the agreement of lambda estimates is known to us).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .timebase import (
    hysteresis,
    mask_runs,
    median_may_reach,
    median_step,
    merge_runs,
    rolling_median_at,
    window_counts,
)


def smooth_residual(
    time: np.ndarray, r: np.ndarray, judged: np.ndarray, window_s: float
) -> np.ndarray:
    """Rolling median over the judged samples (others NaN), window ``window_s``."""
    x = np.where(judged, r, np.nan)
    n = max(1, int(round(window_s / median_step(time))))
    med = pd.Series(x).rolling(n, min_periods=max(1, n // 2), center=True).median().to_numpy()
    return np.where(judged, med, np.nan)


def disagreement_intervals(
    time: np.ndarray, r: np.ndarray, judged: np.ndarray, tolerance: float, settings: dict
) -> np.ndarray:
    """Inclusive index pairs of the disagreement stretches of one residual.

    The same stretches as hysteresis on ``|smooth_residual(...)|``, but the rolling median is
    only computed where it may reach the smaller of the release level and the tolerance
    (:func:`~.intervals.median_may_reach`). Elsewhere it is certainly below both, which is all
    the hysteresis needs to know: a release event, stood in for by -inf.
    """
    release = settings["disagreement_release_fraction"] * tolerance
    level = min(release, tolerance)
    x = np.where(judged, r, np.nan)
    n = max(1, int(round(settings["disagreement_smooth_s"] / median_step(time))))
    min_periods = max(1, n // 2)
    # samples with a median (judged, enough valid samples in the window: rolling semantics)
    known = judged & (window_counts(np.isfinite(x), n) >= min_periods)
    exact = known & median_may_reach(x, n, min_periods, -level, level)
    a = np.where(known, -np.inf, np.nan)
    a[exact] = np.abs(rolling_median_at(x, n, min_periods, exact)[exact])
    latched = hysteresis(a, tolerance, release)
    bad = latched & judged & (np.isfinite(a) | (known & ~exact))
    runs = merge_runs(mask_runs(bad), time, settings["disagreement_merge_gap_s"])
    if not len(runs):
        return runs
    step = median_step(time)
    keep = []
    csum = np.concatenate(([0], np.cumsum(bad)))
    for i0, i1 in runs:  # one iteration per stretch
        judged_time = (csum[i1 + 1] - csum[i0]) * step
        keep.append(judged_time >= settings["disagreement_min_duration_s"])
    return runs[np.array(keep, dtype=bool)]


def merge_events(intervals: list[tuple[float, float]]) -> list[tuple[float, float]]:
    """Union of time intervals that overlap."""
    out: list[list[float]] = []
    for a, b in sorted(intervals):
        if out and a <= out[-1][1]:
            out[-1][1] = max(out[-1][1], b)
        else:
            out.append([a, b])
    return [(a, b) for a, b in out]
