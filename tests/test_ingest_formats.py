"""Parquet and ASAM MDF4 inputs: units from the file's metadata, start time, rasters,
duplicate channel names, and the messages for files that are not what their name says."""

from __future__ import annotations

import importlib.util
import subprocess
import sys
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import given
from hypothesis import strategies as st

from pipeline.config import parse_config
from pipeline.errors import ConfigError, InputDataError
from pipeline.ingest import detect_format, read_run
from pipeline.ingest.mdf import resample

N = 200
T = np.arange(N) * 0.5


def config(channels: dict[str, dict[str, Any]], **input: Any) -> Any:
    raw: dict[str, Any] = {"fuel": {"preset": "diesel_2"}, "channels": channels}
    if input:
        raw["input"] = input
    return parse_config(raw, Path("cell.toml"))


# Units left out on purpose: they come from the file.
CHANNELS: dict[str, dict[str, Any]] = {
    "time": {"column": "time"},
    "fuel_mass_flow": {"column": "fuel"},
    "air_mass_flow": {"column": "air", "basis": "wet"},
    "co2": {"column": "co2", "basis": "dry"},
    "o2": {"column": "o2", "basis": "dry"},
    "ambient_pressure": {"column": "baro"},
}


def frame() -> pd.DataFrame:
    rng = np.random.default_rng(7)
    return pd.DataFrame({
        "time": T, "fuel": 10 + rng.normal(0, 0.1, N), "air": 300 + rng.normal(0, 1, N),
        "co2": 8 + rng.normal(0, 0.05, N), "o2": 9 + rng.normal(0, 0.05, N),
        "baro": np.full(N, 985.0),
    })


def write_parquet(path: Path, df: pd.DataFrame, units: dict[str, str],
                  meta: dict[bytes, bytes] | None = None) -> Path:
    tbl = pa.Table.from_pandas(df, preserve_index=False)
    fields = [f.with_metadata({b"unit": units[f.name].encode()}) if f.name in units else f
              for f in tbl.schema]
    schema = pa.schema(fields, metadata={**(tbl.schema.metadata or {}), **(meta or {})})
    pq.write_table(tbl.cast(schema), path)
    return path


UNITS = {"time": "s", "fuel": "g/s", "air": "kg/h", "co2": "%", "o2": "%", "baro": "hPa"}


def test_parquet_units_from_field_metadata_and_start_time(tmp_path: Path) -> None:
    df = frame()
    df.loc[5, "co2"] = np.nan
    path = write_parquet(tmp_path / "n.parquet", df, UNITS,
                         {b"start_time": b"2026-03-14T21:00:00+01:00", b"cell": b"B3"})
    before = path.read_bytes()
    run = read_run(path, config(CHANNELS))
    f = run.frame
    np.testing.assert_allclose(f["time"], T)
    np.testing.assert_allclose(f["fuel_mass_flow"], df["fuel"] * 3.6)  # g/s -> kg/h
    np.testing.assert_allclose(f["ambient_pressure"], 98.5)  # hPa -> kPa
    np.testing.assert_allclose(f["co2"].drop(5), df["co2"].drop(5) / 100)
    assert np.isnan(f["co2"][5]) and run.meta.missing_cells == {"co2": 1}
    assert run.meta.start_time == datetime(2026, 3, 14, 20, 0, tzinfo=UTC)
    assert run.meta.metadata["cell"] == "B3" and run.meta.units_in["fuel_mass_flow"] == "g/s"
    assert path.read_bytes() == before


def test_parquet_timestamp_column_and_config_unit_wins(tmp_path: Path) -> None:
    df = frame()
    df["time"] = pd.date_range("2026-03-14T21:00:00Z", periods=N, freq="500ms")
    path = write_parquet(tmp_path / "n.parquet", df, UNITS)
    chans = {**CHANNELS, "fuel_mass_flow": {"column": "fuel", "unit": "kg/h"}}
    run = read_run(path, config(chans))
    np.testing.assert_allclose(run.frame["time"], T)
    assert run.meta.start_time == datetime(2026, 3, 14, 21, tzinfo=UTC)
    np.testing.assert_allclose(run.frame["fuel_mass_flow"], df["fuel"])  # config unit used
    assert any("the file gives unit 'g/s'" in w for w in run.meta.warnings)


def test_parquet_missing_column_and_junk(tmp_path: Path) -> None:
    path = write_parquet(tmp_path / "n.parquet", frame().rename(columns={"o2": "O2_dry"}),
                         UNITS)
    with pytest.raises(InputDataError, match=r"column 'o2' \(\[channels.o2\] column\) is not "
                                             r"in the Parquet schema"):
        read_run(path, config(CHANNELS))
    junk = tmp_path / "junk.parquet"
    junk.write_bytes(b"PAR1" + bytes(range(256)) * 4)
    with pytest.raises(InputDataError, match="junk.parquet: not a readable Parquet file"):
        read_run(junk, config(CHANNELS))
    text = tmp_path / "text.mf4"
    text.write_text("time,fuel\n0,1\n", encoding="utf-8")
    with pytest.raises(InputDataError, match="the name says an ASAM MDF file"):
        read_run(text, config(CHANNELS))
    assert detect_format(path) == "parquet"


def test_resample_holds_codes_and_never_bridges_holes() -> None:
    ts = np.array([0.0, 1.0, 2.0, 3.0, 10.0, 11.0])
    v = np.array([0.0, 1.0, 2.0, 3.0, 10.0, 11.0])
    grid = np.arange(-1.0, 12.5, 0.5)
    lin = resample(ts, v, grid, hold=False)
    assert np.isnan(lin[grid < 0]).all() and np.isnan(lin[grid > 11]).all()
    np.testing.assert_allclose(lin[(grid >= 0) & (grid <= 3)], grid[(grid >= 0) & (grid <= 3)])
    assert np.isnan(lin[(grid > 3) & (grid < 10)]).all()  # a 7 s hole in a 1 s channel
    held = resample(ts, np.array([0, 0, 2, 2, 3, 3]), grid, hold=True)
    np.testing.assert_array_equal(held[(grid >= 1) & (grid < 2)], [0, 0])
    assert held[grid == 2.5][0] == 2


@given(
    st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=2, max_size=60),
    st.sampled_from([0.01, 0.1, 0.5, 1.0, 2.0]),
    st.booleans(),
)
def test_resample_onto_own_time_base_round_trips(
    values: list[float], step: float, hold: bool
) -> None:
    ts = np.arange(len(values)) * step
    np.testing.assert_array_equal(resample(ts, np.array(values), ts, hold), values)


#: MDF tests need the optional asammdf (``pip install -e '.[test,mdf]'``); CI installs only
#: ``.[test]``, where they are skipped (the Parquet and resampling tests above still run).
needs_asammdf = pytest.mark.skipif(
    importlib.util.find_spec("asammdf") is None, reason="asammdf (mdf extra) not installed"
)


def write_mdf(path: Path) -> Path:
    from asammdf import MDF, Signal

    df = frame()
    m = MDF(version="4.10")
    fast = [Signal(df[c].to_numpy(), T, name=c, unit=UNITS[c]) for c in ("fuel", "air", "o2")]
    fast.append(Signal(np.full(N, 98.0), T, name="baro", unit="kPa"))
    m.append(fast, comment="fast group")
    t2 = T[::4]
    m.append([
        Signal(df["co2"].to_numpy()[::4], t2, name="co2", unit="%"),
        Signal(np.full(t2.size, 990.0), t2, name="baro", unit="hPa"),
        Signal((t2 > 50).astype(np.uint8), t2, name="mode", unit=""),
    ], comment="slow group")
    m.start_time = datetime(2026, 3, 14, 21, 0, tzinfo=UTC)
    m.save(path, overwrite=True)
    m.close()
    return path


@needs_asammdf
def test_mdf_units_raster_duplicates_and_start_time(tmp_path: Path) -> None:
    path = write_mdf(tmp_path / "n.mf4")
    assert detect_format(path) == "mdf"
    chans = {**CHANNELS, "analyzer_mode": {"column": "mode"}}
    run = read_run(path, config(chans))
    f = run.frame
    np.testing.assert_allclose(f["time"], T)  # raster of the fastest mapped channel
    assert run.meta.start_time == datetime(2026, 3, 14, 21, tzinfo=UTC)
    # 'baro' is in both groups: the one with more samples (kPa, group 0) is used, and said so
    np.testing.assert_allclose(f["ambient_pressure"], 98.0)
    assert any("'baro' occurs in 2 channel groups" in w for w in run.meta.warnings)
    # the slow CO2 (2 s) is interpolated onto 0.5 s, the status code held
    df = frame()
    np.testing.assert_allclose(f["co2"].to_numpy()[::4], df["co2"].to_numpy()[::4] / 100)
    mid = f["co2"].to_numpy()[2]
    assert min(df["co2"][0], df["co2"][4]) / 100 <= mid <= max(df["co2"][0], df["co2"][4]) / 100
    assert set(np.unique(f["analyzer_mode"].dropna())) <= {0.0, 1.0}
    np.testing.assert_allclose(f["fuel_mass_flow"], df["fuel"] * 3.6)  # g/s from the channel
    # the other occurrence by group: column = "baro@1" (hPa from that channel)
    run1 = read_run(path, config({**CHANNELS, "ambient_pressure": {"column": "baro@1"}},
                                 raster_s=2.0))
    np.testing.assert_allclose(run1.frame["ambient_pressure"], 99.0)
    np.testing.assert_allclose(run1.frame["time"], T[::4])


@needs_asammdf
def test_mdf_time_channel_not_named_uses_master_with_a_note(tmp_path: Path) -> None:
    path = write_mdf(tmp_path / "n.mf4")
    run = read_run(path, config({**CHANNELS, "time": {"column": "Zeit"}}))
    assert len(run.frame) == N
    assert any("its own time base 'time' is used" in w for w in run.meta.warnings)


@needs_asammdf
def test_mdf_missing_channel_and_corrupt_file(tmp_path: Path) -> None:
    path = write_mdf(tmp_path / "n.mf4")
    with pytest.raises(InputDataError, match=r"column 'nox'.*not in the channels of the MDF"):
        read_run(path, config({**CHANNELS, "nox": {"column": "nox", "unit": "ppm",
                                                   "basis": "dry"}}))
    bad = tmp_path / "bad.mf4"
    bad.write_bytes(b"MDF     4.10    " + bytes(200))
    with pytest.raises(InputDataError, match="bad.mf4: not a readable MDF file"):
        read_run(bad, config(CHANNELS))
    # Through the installed command: one sentence, no "Exception ignored" noise from asammdf.
    exe = Path(sys.executable).with_name("dynoqc")
    cfg = tmp_path / "c.toml"
    cfg.write_text('[fuel]\npreset = "diesel_2"\n' + "".join(
        f'[channels.{q}]\ncolumn = "{c}"\nunit = "{u}"\n{b}' for q, c, u, b in [
            ("time", "time", "s", ""), ("fuel_mass_flow", "fuel", "g/s", ""),
            ("air_mass_flow", "air", "kg/h", 'basis = "wet"\n'),
            ("co2", "co2", "%", 'basis = "dry"\n'), ("o2", "o2", "%", 'basis = "dry"\n')]))
    p = subprocess.run([str(exe), "process", str(bad), "--config", str(cfg), "--out",
                        str(tmp_path / "o")], capture_output=True, text=True, timeout=120)
    assert p.returncode == 3 and p.stderr.strip().splitlines() == [
        f"dynoqc: {bad}: not a readable MDF file (is not a valid MDF file)."]


def test_missing_asammdf_gives_the_install_hint(tmp_path: Path, monkeypatch: Any) -> None:
    path = tmp_path / "n.mf4"
    path.write_bytes(b"MDF     4.10    " + bytes(64))  # an MDF header is enough to dispatch
    monkeypatch.setitem(sys.modules, "asammdf", None)  # import asammdf -> ImportError
    with pytest.raises(ConfigError, match=r"n.mf4: reading ASAM MDF files needs the optional "
                                          r"package asammdf; install the mdf extra: pip "
                                          r"install 'dynoqc\[mdf\]'"):
        read_run(path, config(CHANNELS))


def test_parquet_decimal_columns_are_read_as_numbers(tmp_path: Path) -> None:
    # An export with exact decimals (decimal128, as databases write them): numbers, not an
    # internal error.
    import decimal

    import pyarrow as pa
    import pyarrow.parquet as pq

    from pipeline.config import parse_config
    from pipeline.ingest import read_run

    n = 50
    tab = pa.table({
        "t": pa.array(np.arange(n, dtype=float)),
        "f": pa.array([decimal.Decimal("10.125")] * n, pa.decimal128(10, 3)),
        "a": pa.array([decimal.Decimal("300.50")] * n, pa.decimal128(10, 2)),
        "c": pa.array(np.full(n, 9.0)), "o": pa.array(np.full(n, 9.0)),
    })
    path = tmp_path / "dec.parquet"
    pq.write_table(tab, path)
    from conftest import minimal_raw_config

    cfg = parse_config(minimal_raw_config(), tmp_path / "c.toml")
    run = read_run(path, cfg)
    assert run.frame["fuel_mass_flow"].iloc[0] == 10.125
    assert run.frame["air_mass_flow"].iloc[0] == 300.5
