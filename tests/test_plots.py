"""Report figures: the envelope keeps extremes and gaps; the overview renders from a result."""

from __future__ import annotations

from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pandas as pd
import pytest

from pipeline.records import ProcessResult, make_flags
from pipeline.report.hdf5 import write_result
from pipeline.report.overview import plot_lambda_overview
from pipeline.report.plots import (
    BINS_PER_PIXEL,
    ENVELOPE_BINS_PER_PIXEL,
    bin_mean,
    envelope,
    envelope_bins,
    robust_limits,
    style_path,
    write_png,
)
from pipeline.result import read_result


def test_envelope_keeps_single_sample_spike_and_bin_extremes() -> None:
    rng = np.random.default_rng(0)
    n, n_bins = 100_000, 500
    t = np.arange(n, dtype=np.float64)
    y = rng.normal(1.0, 0.01, n)
    y[54_321] = 7.5  # one-sample spike, lost by y[::k] decimation
    y[12_345] = -3.0
    ex, ey = envelope(t, y, n_bins)
    assert ex.shape == ey.shape == (2 * n_bins,)
    assert ey.max() == 7.5 and ey.min() == -3.0
    assert ex[np.argmax(ey)] == 54_321.0  # drawn at its own time
    # every bin's min and max equal the raw data's (bins of 200 samples here)
    per_bin = y.reshape(n_bins, -1)
    np.testing.assert_array_equal(ey.reshape(n_bins, 2).min(axis=1), per_bin.min(axis=1))
    np.testing.assert_array_equal(ey.reshape(n_bins, 2).max(axis=1), per_bin.max(axis=1))
    assert np.all(np.diff(ex) >= 0)  # a polyline in time order


def test_envelope_keeps_nan_gaps_and_time_gaps() -> None:
    n, n_bins = 20_000, 100
    t = np.arange(n, dtype=np.float64)
    y = np.ones(n)
    y[5_000:6_000] = np.nan  # 5 bins of NaN
    y[9_000] = np.inf  # counts as missing, never drawn as inf
    t2 = np.where(t < 15_000, t, t + 5_000)  # a hole in the time stamps
    ex, ey = envelope(t2, y, n_bins)
    assert not np.isinf(ey).any()
    bins = ey.reshape(n_bins, 2)
    centres = ex.reshape(n_bins, 2).mean(axis=1)
    empty = np.isnan(bins).all(axis=1)
    assert empty.sum() >= 4 + 19  # the NaN stretch and the time hole both break the line
    assert empty[(centres > 5_100) & (centres < 5_900)].all()
    assert empty[(centres > 15_100) & (centres < 19_900)].all()
    assert not empty[centres < 4_900].any()


def test_envelope_short_trace_is_returned_with_gap_breaks() -> None:
    t = np.array([0.0, 1, 2, 3, 10, 11, 12])
    y = np.array([1.0, 2, 3, 4, 5, 6, 7])
    ex, ey = envelope(t, y, 100)
    np.testing.assert_array_equal(ex[~np.isnan(ex)], t)
    np.testing.assert_array_equal(ey[~np.isnan(ey)], y)
    assert np.isnan(ey[4])  # break between 3 s and 10 s


def test_envelope_rejects_bad_input() -> None:
    with pytest.raises(ValueError, match="equal length"):
        envelope(np.arange(3.0), np.arange(4.0), 10)
    with pytest.raises(ValueError, match="n_bins"):
        envelope(np.arange(3.0), np.arange(3.0), 0)


def test_bin_mean_matches_numpy() -> None:
    t = np.arange(1000, dtype=np.float64)
    y = np.sin(t / 50.0)
    y[100:200] = np.nan
    centres, mean = bin_mean(t, y, 10)
    assert np.isnan(mean[1])
    np.testing.assert_allclose(mean[3], y[300:400].mean(), rtol=1e-12)
    np.testing.assert_allclose(centres[0], 999 / 20, rtol=1e-12)


def test_envelope_time_ordered_path_matches_the_general_one() -> None:
    """Time-ordered samples take a sort-free path; it picks the same samples as the
    sort-based path taken for unordered input."""
    rng = np.random.default_rng(5)
    n, n_bins = 30_000, 700
    t = np.sort(rng.uniform(0.0, 3600.0, n))
    y = rng.normal(1.0, 0.05, n)
    y[rng.random(n) < 0.05] = np.nan
    y[2_000:4_000] = np.nan  # empty bins
    y[rng.integers(0, n, 20)] = np.inf
    t[rng.integers(0, n, 10)] = np.nan  # dropped before binning
    fast = envelope(t, y, n_bins)
    order = rng.permutation(n)
    slow = envelope(t[order], y[order], n_bins)
    for a, b in zip(fast, slow, strict=True):
        np.testing.assert_array_equal(a, b)
    assert np.isnan(envelope(t, np.full(n, np.nan), n_bins)[1]).all()


def test_envelope_ties_take_the_first_minimum_and_the_last_maximum() -> None:
    t = np.arange(12, dtype=np.float64)
    y = np.array([2.0, 1, 3, 1, 3, 2, 5, 5, 4, 4, 6, 4])  # bins of 4 samples
    ex, ey = envelope(t, y, 3)
    np.testing.assert_array_equal(ex, [1, 2, 5, 7, 8, 10])
    np.testing.assert_array_equal(ey, [1, 3, 2, 5, 4, 6])


def test_bin_mean_time_ordered_path_matches_the_general_one() -> None:
    rng = np.random.default_rng(6)
    t = np.sort(rng.uniform(0.0, 1000.0, 20_000))
    y = rng.normal(size=t.size)
    y[rng.random(t.size) < 0.1] = np.nan
    order = rng.permutation(t.size)
    c1, m1 = bin_mean(t, y, 300)
    c2, m2 = bin_mean(t[order], y[order], 300)
    np.testing.assert_array_equal(c1, c2)
    np.testing.assert_allclose(m1, m2, rtol=1e-12, atol=1e-15)


def test_envelope_bins_one_per_pixel_but_short_traces_stay_whole() -> None:
    width = 1600.0
    assert envelope_bins(10**6, width) == int(ENVELOPE_BINS_PER_PIXEL * width)
    fine = int(BINS_PER_PIXEL * width)
    assert envelope_bins(2 * fine, width) == fine  # drawn sample by sample, as before
    t = np.arange(2 * fine, dtype=np.float64)
    ex, _ = envelope(t, np.sin(t), envelope_bins(t.size, width))
    np.testing.assert_array_equal(ex, t)


def test_write_png_round_trip(tmp_path: Path) -> None:
    from PIL import Image

    rng = np.random.default_rng(7)
    rgba = rng.integers(0, 256, size=(37, 53, 4), dtype=np.uint8)
    path = write_png(tmp_path / "x.png", rgba, 200)
    with Image.open(path) as im:
        assert im.mode == "RGBA" and im.size == (53, 37)
        np.testing.assert_array_equal(np.asarray(im), rgba)
        assert round(im.info["dpi"][0]) == 200
        assert set(im.info) == {"dpi"}  # no software tag or other text
    with pytest.raises(ValueError, match="RGBA"):
        write_png(tmp_path / "y.png", rgba[..., :3], 200)


def test_robust_limits_ignore_a_spike() -> None:
    y = np.r_[np.linspace(0.95, 1.05, 10_000), 40.0]
    lo, hi = robust_limits(y)
    assert 0.93 < lo < 0.95 and 1.05 < hi < 1.07
    flat_lo, flat_hi = robust_limits(np.ones(100))
    assert flat_hi - flat_lo > 0.02  # a flat trace is not magnified into noise
    assert robust_limits(np.array([np.nan])) == (0.9, 1.1)


def test_style_file_is_packaged() -> None:
    text = style_path().read_text()
    assert "axes.prop_cycle" in text and "0072B2" in text


def _night(tmp_path: Path, columns: tuple[str, ...], start: str | None) -> Path:
    rng = np.random.default_rng(3)
    t = np.arange(0, 4 * 3600, 0.5)
    data = {"time": t}
    for k, name in enumerate(columns):
        data[name] = 1.0 + 0.01 * k + rng.normal(0, 0.003, t.size)
    flags = make_flags(
        [
            {"start_s": 600, "end_s": 900, "check": "analyzer_not_sampling", "severity": "info"},
            {"start_s": 5000, "end_s": 5600, "check": "data_gap", "severity": "warning"},
            {
                "start_s": 7000,
                "end_s": 14_000,
                "check": "drift",
                "suspect": "o2",
                "severity": "error",
                "value": 3.0,
            },
            {
                "start_s": 8000,
                "end_s": 8100,
                "check": "lambda_disagreement",
                "suspect": "air_mass_flow|fuel_mass_flow",
                "severity": "warning",
                "value": 4.0,
            },
        ]
    )
    attrs = {
        "run_name": "test night",
        "source_file": "night.csv",
        "source_sha256": "0" * 64,
        "fuel_name": "diesel",
        "config_file": "cell.toml",
        "tool_version": "0.1.0",
    }
    if start:
        attrs["start_time_utc"] = start
    res = ProcessResult(series=pd.DataFrame(data), series_attrs={}, flags=flags, attrs=attrs)
    return write_result(tmp_path / "night.h5", res)


@pytest.mark.parametrize("start", ["2026-03-14T21:40:00Z", None])
def test_overview_renders_from_read_back_result(tmp_path: Path, start: str | None) -> None:
    cols = ("lambda_flow", "lambda_carbon", "lambda_oxygen", "lambda_sensor")
    res = read_result(_night(tmp_path, cols, start))
    out = tmp_path / "overview.png"
    plot_lambda_overview(res, out)
    img = mpimg.imread(out)
    assert img.shape[1] >= 1200
    assert img.shape[:2] == (960, 1600)
    # something other than white was drawn in the plot area
    assert (img[300:700, 200:1500, :3] < 0.5).any()


def test_overview_is_deterministic(tmp_path: Path) -> None:
    res = read_result(_night(tmp_path, ("lambda_flow", "lambda_carbon"), None))
    plot_lambda_overview(res, tmp_path / "a.png")
    plot_lambda_overview(res, tmp_path / "b.png")
    assert (tmp_path / "a.png").read_bytes() == (tmp_path / "b.png").read_bytes()


def test_overview_skips_absent_series(tmp_path: Path) -> None:
    res = read_result(_night(tmp_path, ("lambda_flow", "lambda_oxygen"), None))
    assert "lambda_sensor" not in res.timeseries
    out = tmp_path / "two.png"
    plot_lambda_overview(res, out)
    assert mpimg.imread(out).shape[1] >= 1200


def test_overview_without_any_estimate_or_flags(tmp_path: Path) -> None:
    t = np.arange(0.0, 100.0)
    res = ProcessResult(
        series=pd.DataFrame({"time": t, "co2": np.full(t.size, 0.1)}),
        series_attrs={},
        flags=make_flags([]),
    )
    back = read_result(write_result(tmp_path / "r.h5", res))
    out = tmp_path / "empty.png"
    plot_lambda_overview(back, out)
    assert mpimg.imread(out).shape[1] >= 1200


def test_plots_take_an_in_memory_result_and_return_the_figure(tmp_path: Path) -> None:
    # A notebook user plots a process_run result without writing a file: the same figure,
    # pixel for pixel, as from the result file read back.
    from matplotlib.figure import Figure

    from pipeline.report.water import plot_water
    from pipeline.result import result_in_memory

    t = np.arange(0.0, 3600.0, 1.0)
    mem = ProcessResult(
        series=pd.DataFrame({"time": t, "lambda_flow": 1.5 + 0.01 * np.sin(t / 300),
                             "exhaust_dewpoint": np.full(t.size, 45.0),
                             "sample_line_temperature": 190.0 - 0.04 * t}),
        series_attrs={"sample_line_temperature": {"units": "degC", "long_name": "line"}},
        flags=make_flags([]),
        attrs={"run_name": "notebook night", "start_time_utc": "2026-03-14T21:00:00Z",
               "tool_version": "0.test"},
    )
    back = read_result(write_result(tmp_path / "r.h5", mem))
    assert list(result_in_memory(mem).timeseries.columns) == list(back.timeseries.columns)
    assert result_in_memory(mem).start_time == back.start_time
    fig = plot_lambda_overview(mem)
    assert isinstance(fig, Figure)
    a, b = tmp_path / "mem.png", tmp_path / "file.png"
    plot_water(mem, a)
    plot_water(back, b)
    np.testing.assert_array_equal(mpimg.imread(a), mpimg.imread(b))
