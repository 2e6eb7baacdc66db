"""The HDF5 result file: contract layout, round trip through read_result, atomic writes."""

from __future__ import annotations

import json
from datetime import UTC, datetime
from pathlib import Path

import h5py
import numpy as np
import pandas as pd
import pytest
from conftest import ROOT

from pipeline.records import FLAG_COLUMNS, ProcessResult, empty_flags, make_flags
from pipeline.report import hdf5 as hdf5_mod
from pipeline.report.hdf5 import write_result
from pipeline.result import parse_time_units, read_result

START = "2026-03-14T21:40:00Z"


def _result(flags: pd.DataFrame | None = None, start: str | None = START) -> ProcessResult:
    n = 1000
    t = np.arange(n, dtype=np.float64) * 0.5
    co2 = np.full(n, 0.12)
    co2[10] = np.nan
    co2[11] = np.inf
    co2[12] = -np.inf
    series = pd.DataFrame(
        {
            "time": t,
            "lambda_flow": 1.0 + 0.01 * np.sin(t),
            "co2": co2,
            "exhaust_dew_point": np.linspace(40.0, 45.0, n),
            "steady": (t > 100).astype(np.float64),
        }
    )
    steady = pd.DataFrame(
        {
            "start_s": [10.0, 200.0],
            "end_s": [90.0, 400.0],
            "n_samples": np.array([161, 401], dtype=np.int64),
            "label": ["idle", "2000 rpm / 80 N.m"],
            "lambda_flow_mean": [1.01, np.inf],
        }
    )
    steady.attrs["units"] = {"start_s": "s", "end_s": "s", "lambda_flow_mean": "1"}
    if flags is None:
        flags = make_flags(
            [
                {
                    "start_s": 100.0,
                    "end_s": 160.0,
                    "check": "drift",
                    "suspect": "co2",
                    "severity": "warning",
                    "value": 2.5,
                    "message": "CO2 reads 2.5 % high – drift",
                },
                {
                    "start_s": 300.0,
                    "end_s": 330.0,
                    "check": "data_gap",
                    "severity": "info",
                    "message": "no samples for 30 s",
                },
            ]
        )
    attrs = {
        "tool_version": "0.1.0",
        "created_utc": "2026-03-15T07:00:00Z",
        "source_file": "cell3_night.csv",
        "source_sha256": "ab" * 32,
        "config_toml": '[run]\nname = "night"\n',
        "fuel_name": "diesel",
        "fuel_h_c": 1.85,
        "fuel": {"name": "diesel", "h_c": 1.85},
        "channels_used": ["co2", "o2"],
    }
    if start:
        attrs["start_time_utc"] = start
    return ProcessResult(
        series=series,
        series_attrs={
            "co2": {"basis": "dry"},
            "exhaust_dew_point": {"units": "degC", "long_name": "exhaust water dew point"},
            "steady": {"units": "1", "long_name": "1 on a steady operating point"},
        },
        flags=flags,
        tables={"steady_points": steady},
        group_attrs={
            "alignment": {"analyzer_delay_s": 8.5, "method": "cross-correlation", "quality": 0.93}
        },
        attrs=attrs,
    )


def test_contract_layout(tmp_path: Path) -> None:
    res = _result()
    out = write_result(tmp_path / "night.h5", res)
    assert out == tmp_path / "night.h5"
    with h5py.File(out, "r") as f:
        assert f.attrs["Conventions"] == "CF-1.10"
        assert f.attrs["source_sha256"] == "ab" * 32
        assert json.loads(f.attrs["fuel"]) == {"name": "diesel", "h_c": 1.85}
        assert f.attrs["config_toml"].startswith("[run]")
        assert f.id.get_create_plist().get_version()[0] == 0  # superblock v0: old readers open it
        ts = f["timeseries"]
        assert set(ts) == set(res.series.columns)
        tm = ts["time"]
        assert tm.attrs["units"] == f"seconds since {START}"
        assert tm.is_scale
        for name, ds in ts.items():
            assert ds.ndim == 1 and ds.shape == (len(res.series),)
            assert ds.dtype == np.float64
            assert ds.attrs["units"] and ds.attrs["long_name"], name
            assert ds.compression == "gzip" and ds.shuffle
            assert ds.compression_opts == hdf5_mod.recorded_gzip_level()
            assert ds.chunks == (len(res.series),)  # shorter than 64 k samples: one chunk
            assert np.isnan(ds.fillvalue)
            if name != "time":
                assert ds.dims[0][0] == tm, name
            assert not np.isinf(ds[()]).any()
        assert ts["co2"].attrs["units"] == "mol/mol"  # from the glossary
        assert ts["co2"].attrs["basis"] == "dry"  # given attribute kept
        assert np.isnan(ts["co2"][10:13]).all()  # NaN, +inf, -inf all stored as NaN
        assert ts["exhaust_dew_point"].attrs["units"] == "degC"

        fl = f["flags"]
        # the row dimension, the contract's columns, then value_unit (compatible extensions)
        assert list(fl) == ["flag", *FLAG_COLUMNS, "value_unit"]
        assert fl["flag"].attrs["CLASS"] == b"DIMENSION_SCALE"
        assert {len(fl[c]) for c in fl} == {2}
        for col in ("start_s", "end_s", "value"):
            assert fl[col].dtype == np.float64
        for col in ("check", "suspect", "severity", "message"):
            assert h5py.check_string_dtype(fl[col].dtype).encoding == "utf-8"
            assert h5py.check_string_dtype(fl[col].dtype).length is None  # variable length
        # seconds since the start, said the CF way when the start is known (xarray decodes
        # them to datetimes); the values are unchanged
        assert fl["start_s"].attrs["units"] == ts["time"].attrs["units"]
        assert fl["message"].asstr()[0].endswith("– drift")

        sp = f["steady_points"]
        assert list(sp) == ["point", "start_s", "end_s", "n_samples", "label",
                            "lambda_flow_mean"]
        assert sp["n_samples"].dtype == np.int64
        assert sp["start_s"].attrs["units"] == ts["time"].attrs["units"]
        assert all("long_name" in sp[c].attrs for c in sp)
        assert np.isnan(sp["lambda_flow_mean"][1])
        assert f["alignment"].attrs["analyzer_delay_s"] == 8.5
        assert f["alignment"].attrs["method"] == "cross-correlation"


def test_time_units_plain_seconds_without_start(tmp_path: Path) -> None:
    out = write_result(tmp_path / "r.h5", _result(start=None))
    with h5py.File(out, "r") as f:
        assert f["timeseries/time"].attrs["units"] == "s"
    assert read_result(out).start_time is None


def test_round_trip(tmp_path: Path) -> None:
    res = _result()
    back = read_result(write_result(tmp_path / "night.h5", res))

    expected = res.series.copy()
    expected = expected.replace([np.inf, -np.inf], np.nan)
    pd.testing.assert_frame_equal(back.timeseries, expected)
    assert list(back.timeseries.columns)[0] == "time"
    assert back.units["lambda_flow"] == "1"
    assert back.units["time"] == f"seconds since {START}"
    assert back.long_names["co2"] == "CO2 mole fraction"
    assert back.series_attrs["co2"]["basis"] == "dry"
    assert "DIMENSION_LIST" not in back.series_attrs["co2"]
    assert back.start_time == datetime(2026, 3, 14, 21, 40, tzinfo=UTC)

    pd.testing.assert_frame_equal(back.flags, res.flags, check_dtype=True)
    assert isinstance(back.flags["check"].iloc[0], str)

    sp = back.tables["steady_points"]
    exp_sp = res.tables["steady_points"].replace([np.inf], np.nan)
    pd.testing.assert_frame_equal(sp, exp_sp, check_dtype=False)
    assert sp["n_samples"].dtype == np.int64
    assert sp.attrs["units"]["end_s"] == f"seconds since {START}"

    assert back.group_attrs == {"alignment": res.group_attrs["alignment"]}
    for key, value in res.attrs.items():
        assert back.attrs[key] == value, key
    assert back.attrs["Conventions"] == "CF-1.10"


def test_empty_flags_round_trip(tmp_path: Path) -> None:
    out = write_result(tmp_path / "r.h5", _result(flags=empty_flags()))
    with h5py.File(out, "r") as f:
        assert list(f["flags"]) == ["flag", *FLAG_COLUMNS, "value_unit"]
        assert all(f["flags"][c].shape == (0,) for c in FLAG_COLUMNS)
        assert h5py.check_string_dtype(f["flags/check"].dtype) is not None
    back = read_result(out)
    assert len(back.flags) == 0
    assert list(back.flags.columns)[: len(FLAG_COLUMNS)] == list(FLAG_COLUMNS)
    assert back.flags["start_s"].dtype == np.float64
    assert back.flags["check"].dtype == object


def test_long_series_chunked_at_64k(tmp_path: Path) -> None:
    n = 150_000
    res = _result()
    t = np.arange(n) * 0.1
    res.series = pd.DataFrame({"time": t, "lambda_flow": np.ones(n)})
    with h5py.File(write_result(tmp_path / "r.h5", res), "r") as f:
        assert f["timeseries/lambda_flow"].chunks == (65536,)


def test_missing_units_raise(tmp_path: Path) -> None:
    res = _result()
    res.series["mystery_signal"] = 1.0
    with pytest.raises(ValueError, match="mystery_signal.*units"):
        write_result(tmp_path / "r.h5", res)
    res.series_attrs["mystery_signal"] = {"long_name": "a thing"}
    with pytest.raises(ValueError, match="mystery_signal.*no units"):
        write_result(tmp_path / "r.h5", res)
    assert list(tmp_path.iterdir()) == []  # nothing left behind


def test_missing_time_raises(tmp_path: Path) -> None:
    res = _result()
    res.series = res.series.drop(columns="time")
    with pytest.raises(ValueError, match="'time'"):
        write_result(tmp_path / "r.h5", res)


@pytest.mark.parametrize("exc", [RuntimeError("disk full"), KeyboardInterrupt()])
def test_failed_write_leaves_old_result_and_no_temp(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, exc: BaseException
) -> None:
    out = tmp_path / "night.h5"
    write_result(out, _result())
    before = out.read_bytes()

    def boom(*args: object, **kwargs: object) -> None:
        raise exc

    monkeypatch.setattr(hdf5_mod, "_write_flags", boom)  # fails after /timeseries is written
    with pytest.raises(type(exc)):
        write_result(out, _result())
    assert out.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["night.h5"]


def test_failed_first_write_creates_nothing(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    def boom(*args: object, **kwargs: object) -> None:
        raise KeyboardInterrupt

    monkeypatch.setattr(hdf5_mod.os, "replace", boom)
    with pytest.raises(KeyboardInterrupt):
        write_result(tmp_path / "night.h5", _result())
    assert list(tmp_path.iterdir()) == []


def test_result_file_is_not_private(tmp_path: Path) -> None:
    out = write_result(tmp_path / "night.h5", _result())
    assert out.stat().st_mode & 0o044  # readable by group/others as the umask allows


def test_parse_time_units() -> None:
    assert parse_time_units("s") is None
    assert parse_time_units("seconds since 2026-01-01T10:00:00Z") == datetime(
        2026, 1, 1, 10, tzinfo=UTC
    )
    assert parse_time_units("seconds since 2026-01-01 10:00:00") == datetime(
        2026, 1, 1, 10, tzinfo=UTC
    )


def test_start_time_as_aware_datetime_is_converted_to_utc(tmp_path: Path) -> None:
    from datetime import timedelta, timezone

    res = _result()
    res.attrs["start_time_utc"] = datetime(2026, 3, 14, 22, 40, tzinfo=timezone(timedelta(hours=1)))
    with h5py.File(write_result(tmp_path / "r.h5", res), "r") as f:
        assert f["timeseries/time"].attrs["units"] == f"seconds since {START}"
        assert f.attrs["start_time_utc"] == START


def _long_result(n: int) -> ProcessResult:
    """A result with several chunks per series, a partial last chunk, NaN/inf and non-float."""
    rng = np.random.default_rng(3)
    res = _result()
    co2 = rng.normal(0.12, 0.01, n)
    co2[[5, n // 2, n - 1]] = [np.nan, np.inf, -np.inf]
    res.series = pd.DataFrame(
        {
            "time": np.arange(n) * 0.1,
            "lambda_flow": 1.0 + rng.normal(0, 0.01, n),
            "co2": co2,
            "steady": (np.arange(n) % 7 == 0).astype(np.int8),  # not float64: converted
        }
    )
    return res


@pytest.mark.parametrize("encoder", ["default", "stdlib"])
def test_chunks_encoded_in_threads_read_back_everywhere(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, encoder: str
) -> None:
    """Chunks are shuffled + deflated by write_result itself (write_direct_chunk): the file
    must hold the standard filter pipeline and decode, through HDF5's own filters, to the same
    values as a dataset written by HDF5 with those filters."""
    import zlib

    if encoder == "stdlib":  # the path taken when the optional isal package is missing
        monkeypatch.setattr(
            hdf5_mod, "_deflate_encoder", lambda: lambda b: zlib.compress(b, hdf5_mod.GZIP_LEVEL)
        )
    n = 150_001  # 3 chunks of 64 Ki samples, the last one partial
    res = _long_result(n)
    out = write_result(tmp_path / "r.h5", res)
    ref = tmp_path / "ref.h5"
    with h5py.File(out, "r") as f, h5py.File(ref, "w") as g:
        for name in res.series.columns:
            ds = f["timeseries"][name]
            expected = res.series[name].to_numpy(dtype=np.float64)
            expected = np.where(np.isinf(expected), np.nan, expected)
            assert ds.chunks == (65536,) and ds.shuffle and ds.compression == "gzip"
            assert ds.compression_opts == hdf5_mod.recorded_gzip_level()
            assert ds.shape == (n,) and ds.dtype == np.float64
            assert np.array_equal(ds[()], expected, equal_nan=True), name
            assert np.array_equal(ds[65530:65540], expected[65530:65540], equal_nan=True)
            # every stored chunk is a plain zlib stream of the byte-shuffled float64 values
            for k, off in enumerate(range(0, n, 65536)):
                mask, raw = ds.id.read_direct_chunk((off,))
                assert mask == 0
                plain = np.frombuffer(zlib.decompress(raw), np.uint8).reshape(8, -1).T
                values = plain.copy().view("<f8").ravel()
                m = min(65536, n - off)
                assert np.array_equal(values[:m], expected[off : off + m], equal_nan=True), k
                assert np.isnan(values[m:]).all()  # padded with the fill value
            g.create_dataset(name, data=expected, chunks=(65536,), compression="gzip",
                             compression_opts=4, shuffle=True, fillvalue=np.nan)
        ts = f["timeseries"]
        assert ts["co2"].dims[0][0] == ts["time"]
    with h5py.File(ref, "r") as g, h5py.File(out, "r") as f:
        for name in res.series.columns:
            assert np.array_equal(g[name][()], f["timeseries"][name][()], equal_nan=True)


def test_encoding_error_removes_temp_file(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """An exception in an encoding thread reaches the caller; nothing is left behind."""

    def broken() -> object:
        def deflate(buf: object) -> bytes:
            raise RuntimeError("encoder failed")

        return deflate

    monkeypatch.setattr(hdf5_mod, "_deflate_encoder", broken)
    with pytest.raises(RuntimeError, match="encoder failed"):
        write_result(tmp_path / "r.h5", _long_result(70_000))
    assert list(tmp_path.iterdir()) == []


def test_non_numeric_series_raises(tmp_path: Path) -> None:
    res = _result()
    res.series["co2"] = ["x"] * len(res.series)
    with pytest.raises(ValueError, match="'co2' is not numeric"):
        write_result(tmp_path / "r.h5", res)
    assert list(tmp_path.iterdir()) == []


def test_columns_frame_equals_the_pandas_constructor_without_copying() -> None:
    # The no-copy frame (pandas' block API) must be the frame pandas itself builds.
    from pipeline.records import columns_frame, with_columns

    rng = np.random.default_rng(3)
    cols = {"time": np.arange(1000.0), "a": rng.normal(size=1000), "ok": rng.random(1000) > 0.5,
            "n": np.arange(1000)}
    df = columns_frame(cols)
    pd.testing.assert_frame_equal(df, pd.DataFrame(cols))
    assert np.shares_memory(df["a"].to_numpy(), cols["a"])
    pd.testing.assert_frame_equal(df[df["ok"]], pd.DataFrame(cols)[cols["ok"]])
    new = with_columns(df, {"a": -cols["a"], "b": cols["a"] * 2})
    assert list(new.columns) == ["time", "a", "ok", "n", "b"]
    np.testing.assert_array_equal(new["a"], -cols["a"])
    np.testing.assert_array_equal(df["a"], cols["a"])  # the original frame is unchanged
    mixed = columns_frame({"s": ["x"] * 3, "v": np.ones(3)})  # not all numeric: pandas builds it
    assert mixed["s"].tolist() == ["x"] * 3


def test_stored_series_are_the_values_in_the_file(tmp_path: Path) -> None:
    # What process_to_files hands to the report from memory equals what the file holds.
    from pipeline.report.hdf5 import stored_series

    n = 70000  # more than one chunk
    t = np.arange(n, dtype=float)
    x = np.sin(t / 1e3)
    x[5] = np.inf
    x[7] = -np.inf
    res = ProcessResult(
        series=pd.DataFrame({"time": t, "lambda_flow": x, "steady": (t % 2 == 0)}),
        series_attrs={"steady": {"units": "1", "long_name": "steady mask"}}, flags=empty_flags(),
    )
    path = write_result(tmp_path / "r.h5", res)
    mem = stored_series(res)
    with h5py.File(path) as f:
        disk = {n: f["timeseries"][n][()] for n in f["timeseries"]}  # h5py decodes
    assert set(mem) == set(disk)
    for name in mem:
        np.testing.assert_array_equal(mem[name], disk[name])
    assert np.isnan(mem["lambda_flow"][[5, 7]]).all() and np.isinf(x[5])  # input unchanged


def test_an_interrupt_lost_on_its_way_up_commits_nothing(tmp_path: Path) -> None:
    # Python prints and drops a KeyboardInterrupt raised inside a weakref callback or
    # __del__; under stop_on_interrupt the request is remembered and no file is renamed into
    # place afterwards, and the block still ends with KeyboardInterrupt.
    import os
    import signal
    import time

    from pipeline.atomic import atomic_path, interrupt_requested, stop_on_interrupt

    with pytest.raises(KeyboardInterrupt), stop_on_interrupt():
        try:
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.5)
        except KeyboardInterrupt:
            pass  # swallowed, as in a weakref callback
        assert interrupt_requested()
        with pytest.raises(KeyboardInterrupt), atomic_path(tmp_path / "r.h5") as tmp:
            tmp.write_text("complete, but the user asked to stop")
        assert list(tmp_path.iterdir()) == []
    assert not interrupt_requested()  # cleared on leaving the block
    with atomic_path(tmp_path / "r.h5") as tmp:
        tmp.write_text("ok")
    assert (tmp_path / "r.h5").read_text() == "ok"


def test_tables_open_in_xarray_with_named_rows_and_decoded_times(tmp_path: Path) -> None:
    # Reference readers (xarray over h5netcdf, as a netCDF user opens the file): every table
    # has a named row dimension (no phony_dim warning), interval times decode to datetimes,
    # every column has a long_name and every numeric column units (flags/value: its unit is
    # per row, in value_unit).
    import warnings

    xr = pytest.importorskip("xarray")
    pytest.importorskip("h5netcdf")
    from pipeline import process_to_files

    out = process_to_files(ROOT / "sample_runs" / "cell_b3_2026-03-14.csv.gz",
                           ROOT / "configs" / "cell_b3.toml", tmp_path, plots=False)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for group, dim in (("flags", "flag"), ("steady_points", "point"),
                           ("drift", "drift_row"), ("verdicts", "verdict_row"),
                           ("emissions", "emissions_row")):
            ds = xr.open_dataset(out.result_file, group=group, engine="h5netcdf")
            assert list(ds.sizes) == [dim]
            if "start_s" in ds:
                assert np.issubdtype(ds["start_s"].dtype, np.datetime64)
            ds.close()
    with h5py.File(out.result_file) as f:
        for group in ("flags", "steady_points", "drift", "verdicts", "emissions"):
            for name, col in f[group].items():
                assert "long_name" in col.attrs, (group, name)
                if col.dtype.kind in "fiu" and (group, name) != ("flags", "value"):
                    assert "units" in col.attrs, (group, name)
