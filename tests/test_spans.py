"""Masks to intervals and data_gap flags (bookkeeping; no physics involved)."""

import numpy as np

from pipeline.checks.availability import gap_flags
from pipeline.spans import mask_to_intervals, runs


def test_runs_and_intervals():
    m = np.array([0, 1, 1, 0, 0, 1, 0, 1, 1, 1], bool)
    s, e = runs(m)
    assert s.tolist() == [1, 5, 7] and e.tolist() == [2, 5, 9]
    t = np.arange(10.0)
    assert [iv[:2] for iv in mask_to_intervals(t, m)] == [(1.0, 2.0), (5.0, 5.0), (7.0, 9.0)]
    merged = mask_to_intervals(t, m, merge_gap_s=3.0)
    assert [iv[:2] for iv in merged] == [(1.0, 9.0)]
    assert [iv[:2] for iv in mask_to_intervals(t, m, min_duration_s=1.5)] == [(7.0, 9.0)]


def test_gap_flags_group_channels_and_time_holes():
    t = np.r_[np.arange(0.0, 50.0), np.arange(80.0, 100.0)]  # 30 s hole in the log
    a = np.ones(t.size)
    b = np.ones(t.size)
    a[10:15] = np.nan
    b[10:15] = np.nan
    b[30] = np.nan  # a single bad cell: not a gap
    rows = gap_flags(t, {"co2": a, "o2": b})
    assert len(rows) == 2
    first, hole = rows
    assert first.suspect == "co2|o2"
    assert (first.start_s, first.end_s) == (9.0, 15.0)
    assert hole.suspect == "time" and hole.value == 31.0


def test_group_mean_std_equals_pandas_groupby() -> None:
    # Reference: pandas GroupBy.mean / GroupBy.std (ddof 1, NaN skipped), groups unsorted,
    # samples outside every group (-1), a group of one sample (std NaN) and an empty group.
    import pandas as pd

    from pipeline.spans import group_mean_std

    rng = np.random.default_rng(11)
    n, k = 5000, 6
    group = rng.integers(-1, k - 2, n)
    group[17] = k - 2  # one sample only; group k - 1 stays empty
    x = 1e4 + rng.normal(size=n)  # large offset: a one-pass formula would lose digits
    x[rng.random(n) < 0.1] = np.nan
    mean, std = group_mean_std(group, (group >= 0) & np.isfinite(x), x, k)
    ref = pd.DataFrame({"g": group, "x": x})[group >= 0].groupby("g")["x"]
    want_mean = ref.mean().reindex(range(k)).to_numpy()
    want_std = ref.std().reindex(range(k)).to_numpy()
    np.testing.assert_allclose(mean, want_mean, rtol=1e-12, equal_nan=True)
    np.testing.assert_allclose(std, want_std, rtol=1e-9, equal_nan=True)
    assert np.isnan(std[k - 2]) and np.isnan(mean[k - 1])
