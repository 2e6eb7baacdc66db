"""Report speed-ups keep the numbers and the pictures: reportdata memo and run-based sums, the
steady-point table drawn without matplotlib's Table, the remembered time-axis ticks."""

from __future__ import annotations

from pathlib import Path

import matplotlib.dates as mdates
import numpy as np
import pandas as pd
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from pipeline.records import empty_flags, make_flags
from pipeline.report import reportdata as rd
from pipeline.report.plots import format_time_axis
from pipeline.report.steady_table import plot_steady_table
from pipeline.result import ResultFile

WINDOWS = [(100.0, 1300.0), (1500.0, 2900.0), (3100.0, 3500.0)]


def _res(shuffle: bool = False, start: str | None = "2026-03-14T21:00:00") -> ResultFile:
    """A small in-memory result: 1 Hz for an hour, three steady windows, a sampling gap, NaN
    samples in the residual; ``shuffle`` puts the rows out of time order."""
    rng = np.random.default_rng(11)
    t = np.arange(0.0, 3600.0)
    n = t.size
    steady = np.zeros(n)
    for a, b in WINDOWS:
        steady[(t >= a) & (t <= b)] = 1.0
    lf = 1.5 + 0.01 * rng.normal(size=n)
    lc = lf * (1.0 + 0.04 * (t > 2000)) + 0.01 * rng.normal(size=n)
    res_cf = lc / lf - 1.0
    res_cf[rng.random(n) < 0.1] = np.nan
    ts = pd.DataFrame(
        {
            "time": t,
            "steady": steady,
            "sampling": np.where((t > 600) & (t < 700), 0.0, 1.0),
            "speed": np.full(n, 2000.0) + rng.normal(size=n),
            "torque": np.full(n, 100.0),
            "fuel_mass_flow": np.full(n, 10.0),
            "fuel_mass_flow_carbon": 10.0 * lf / lc,
            "lambda_flow": lf,
            "lambda_carbon": lc,
            "residual_carbon_flow": res_cf,
        }
    )
    if shuffle:
        ts = ts.iloc[rng.permutation(n)].reset_index(drop=True)
    tables = {
        "steady_points": pd.DataFrame(
            {"start_s": [w[0] for w in WINDOWS], "end_s": [w[1] for w in WINDOWS]}
        )
    }
    start_time = pd.Timestamp(start).to_pydatetime() if start else None
    return ResultFile(timeseries=ts, units={}, long_names={}, series_attrs={},
                      flags=empty_flags(), tables=tables, attrs={"fuel": {"w_c": 0.86}},
                      start_time=start_time)


def _naive_point_means(res: ResultFile) -> pd.DataFrame:
    """Steady-point means by pandas groupby (the reference)."""
    ts = res.timeseries
    idx = pd.Series(rd.point_index(res))
    return ts[idx.to_numpy() >= 0].groupby(idx[idx >= 0].to_numpy()).mean()


def test_steady_point_stats_match_a_groupby_in_and_out_of_time_order() -> None:
    for shuffle in (False, True):
        res = _res(shuffle)
        pts = rd.steady_point_stats(res)
        ref = _naive_point_means(res)
        for q in ("speed", "lambda_carbon", "residual_carbon_flow"):
            np.testing.assert_allclose(pts[q], ref[q], rtol=1e-12)
        assert list(pts["samples"]) == list(
            pd.Series(rd.point_index(res)).value_counts().sort_index().loc[0:]
        )


def test_steady_blocks_and_time_blocks_do_not_depend_on_row_order() -> None:
    a, b = _res(False), _res(True)
    ba = rd.steady_blocks(a).sort_values(["point", "t_s"]).reset_index(drop=True)
    bb = rd.steady_blocks(b).sort_values(["point", "t_s"]).reset_index(drop=True)
    pd.testing.assert_frame_equal(ba, bb, rtol=1e-12)
    for x, y in zip(rd.time_blocks(a, "residual_carbon_flow"),
                    rd.time_blocks(b, "residual_carbon_flow"), strict=True):
        np.testing.assert_allclose(x, y, rtol=1e-12)
    tm, mean, lo, hi = rd.time_blocks(a, "residual_carbon_flow")
    assert np.all(lo <= mean) and np.all(mean <= hi)


def test_memo_returns_copies_and_follows_a_replaced_table() -> None:
    res = _res()
    first = rd.steady_point_stats(res)
    first["speed"] = -1.0  # the caller's copy, not the remembered frame
    assert (rd.steady_point_stats(res)["speed"] > 1000).all()
    idx = rd.point_index(res)
    idx[:] = 7
    assert (rd.point_index(res) != 7).any()
    # a new timeseries table (e.g. another run read into the same object) is not served
    # from the memo of the old one
    res.timeseries = res.timeseries.assign(speed=res.timeseries["speed"] + 1000.0)
    np.testing.assert_allclose(rd.steady_point_stats(res)["speed"],
                               _naive_point_means(res)["speed"], rtol=1e-12)
    # nor after a column was added in place
    res.timeseries["brake_power"] = 50.0
    assert (rd.steady_point_stats(res)["brake_power"] == 50.0).all()


def test_steady_table_marks_flagged_rows_and_values_beyond_tolerance(tmp_path: Path) -> None:
    import matplotlib.image as mpimg

    res = _res()
    res.flags = make_flags([{"start_s": 2000, "end_s": 3600, "check": "drift",
                             "suspect": "co2", "severity": "warning", "value": 4.0}])
    paths = plot_steady_table(res, tmp_path / "t.png")
    img = mpimg.imread(paths[0])
    assert img.shape[1] == 1600
    # the flagged rows carry the light vermillion fill (#fbe3d6)
    fill = np.all(np.abs(img[..., :3] - np.array([0xFB, 0xE3, 0xD6]) / 255) < 2 / 255, axis=2)
    assert fill.sum() > 10_000


@pytest.mark.parametrize("maxticks", [7, 12])
def test_remembered_time_ticks_equal_matplotlibs(maxticks: int) -> None:
    res = _res()
    fig = Figure(figsize=(8, 3), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    day0 = mdates.date2num(res.start_time)
    ax.plot([day0, day0 + 0.5], [0, 1])
    format_time_axis(res, ax, maxticks=maxticks)
    ref = mdates.AutoDateLocator(minticks=3, maxticks=maxticks)
    ref.set_axis(ax.xaxis)
    fmt = mdates.ConciseDateFormatter(ref, show_offset=False)
    for lim in ((day0, day0 + 0.5), (day0, day0 + 0.1), (day0, day0 + 0.5)):
        ax.set_xlim(*lim)
        ticks = ax.xaxis.get_major_locator()()
        np.testing.assert_array_equal(ticks, ref())
        assert ax.xaxis.get_major_formatter().format_ticks(ticks) == fmt.format_ticks(ticks)
