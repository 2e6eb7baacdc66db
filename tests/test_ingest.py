"""Ingest of CSV/TSV logger exports: layout detection, units, time base, messages."""

from __future__ import annotations

import gzip
import hashlib
import math
import tempfile
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pipeline.config import Config, parse_config
from pipeline.errors import ConfigError, InputDataError
from pipeline.ingest import monotone_time, read_run, sniff, split_name_unit

# Demo column names are our own invention.
BASE_CHANNELS: dict[str, dict[str, Any]] = {
    "time": {"column": "t"},
    "fuel_mass_flow": {"column": "fuel", "unit": "kg/h"},
    "air_mass_flow": {"column": "air", "unit": "kg/h", "basis": "wet"},
    "co2": {"column": "co2", "unit": "%", "basis": "dry"},
    "o2": {"column": "o2", "unit": "%", "basis": "dry"},
}


def make_config(
    channels: dict[str, dict[str, Any]] | None = None,
    input: dict[str, Any] | None = None,
    fuel: dict[str, Any] | None = None,
    replace: bool = False,
) -> Config:
    chans = dict(channels or {}) if replace else {**BASE_CHANNELS, **(channels or {})}
    raw: dict[str, Any] = {"fuel": fuel or {"preset": "gasoline"}, "channels": chans}
    if input:
        raw["input"] = input
    return parse_config(raw, Path("test.toml"))


def write(path: Path, text: str, encoding: str = "utf-8") -> Path:
    path.write_bytes(text.encode(encoding))
    return path


BASIC = """t,fuel,air,co2,o2
0.0,10.5,300.0,13.2,1.5
0.1,10.6,301.0,13.3,1.4
0.2,10.7,302.0,13.4,1.3
"""


def test_comma_delimited_canonical_frame(tmp_path: Path) -> None:
    run = read_run(write(tmp_path / "a.csv", BASIC), make_config())
    f = run.frame
    assert list(f.columns) == ["time", "fuel_mass_flow", "air_mass_flow", "co2", "o2"]
    assert all(str(dt) == "float64" for dt in f.dtypes)
    assert f.index.equals(__import__("pandas").RangeIndex(3))
    np.testing.assert_allclose(f["time"], [0.0, 0.1, 0.2])
    # 13.2 % = 0.132 mol/mol (per cent = 1e-2, SI Brochure).
    np.testing.assert_allclose(f["co2"], [0.132, 0.133, 0.134], rtol=1e-12)
    np.testing.assert_allclose(f["air_mass_flow"], [300.0, 301.0, 302.0])
    assert run.meta.rows_read == 3 and run.meta.rows_dropped == 0
    assert run.meta.columns_in["co2"] == "co2" and run.meta.units_in["co2"] == "%"
    assert run.meta.bad_cells == {} and run.meta.start_time is None


def test_semicolon_decimal_comma(tmp_path: Path) -> None:
    text = BASIC.replace(",", ";").replace(".", ",")
    path = write(tmp_path / "b.csv", text)
    layout = sniff(path, make_config().input)
    assert (layout.delimiter, layout.decimal) == (";", ",")
    run = read_run(path, make_config())
    np.testing.assert_allclose(run.frame["fuel_mass_flow"], [10.5, 10.6, 10.7])
    np.testing.assert_allclose(run.frame["time"], [0.0, 0.1, 0.2])


def test_tab_delimited_with_decimal_comma_and_units_row(tmp_path: Path) -> None:
    text = "t\tfuel\tair\tco2\to2\ns\tg/s\tkg/h\t%\tppm\n"
    text += "0,5\t2,5\t300\t13,2\t15000\n1,0\t2,5\t300\t13,2\t15000\n1,5\t3\t300\t13,2\t15000\n"
    cfg = make_config({"fuel_mass_flow": {"column": "fuel", "unit": "g/s"},
                       "o2": {"column": "o2", "unit": "ppm", "basis": "dry"}})
    run = read_run(write(tmp_path / "c.tsv", text), cfg)
    # 2.5 g/s = 9 kg/h (3600 s/h, 1000 g/kg); 15000 ppm = 0.015 mol/mol.
    np.testing.assert_allclose(run.frame["fuel_mass_flow"], [9.0, 9.0, 10.8])
    np.testing.assert_allclose(run.frame["o2"], [0.015] * 3)
    np.testing.assert_allclose(run.frame["time"], [0.5, 1.0, 1.5])


def test_comment_and_metadata_lines_and_start_time(tmp_path: Path) -> None:
    text = (
        "# overnight map, cell 3\n"
        "# start_time: 2026-03-14T21:00:00Z\n"
        "// sample rate = 10 Hz\n"
        "Operator;A. N. Other\n"
        "\n"
        "t;fuel;air;co2;o2\n"
        "s;kg/h;kg/h;%;%\n"
        "0;10;300;13;1\n1;10;300;13;1\n2;10;300;13;1\n"
    )
    run = read_run(write(tmp_path / "d.csv", text), make_config())
    md = run.meta.metadata
    assert md["start_time"] == "2026-03-14T21:00:00Z"
    assert md["Operator"] == "A. N. Other"
    assert md["sample rate"] == "10 Hz"
    assert run.meta.start_time == datetime(2026, 3, 14, 21, 0, tzinfo=UTC)
    assert len(run.frame) == 3


def test_date_and_time_metadata_and_excel_padding(tmp_path: Path) -> None:
    text = (
        "Date;2026-03-14;;;\n"
        "Time;21:30:00+01:00;;;\n"
        "Operator;A. N. Other;;;\n"
        "t;fuel;air;co2;o2;\n"
        "0;1;2;3;4;\n1;1;2;3;4;\n2;1;2;3;4;\n"
    )
    run = read_run(write(tmp_path / "d2.csv", text), make_config())
    assert run.meta.metadata["Date"] == "2026-03-14"
    assert run.meta.start_time == datetime(2026, 3, 14, 20, 30, tzinfo=UTC)
    np.testing.assert_allclose(run.frame["o2"], [0.04] * 3)
    # A date alone does not give the start of the run.
    run = read_run(write(tmp_path / "d3.csv", text.replace("Time;", "Shift;")), make_config())
    assert run.meta.start_time is None
    assert any("start time of the run is unknown" in w for w in run.meta.warnings)


def test_units_row_detected_and_used_for_implicit_time_unit(tmp_path: Path) -> None:
    text = "t,fuel,air,co2,o2\nms,kg/h,kg/h,%,%\n0,1,2,3,4\n100,1,2,3,4\n200,1,2,3,4\n"
    path = write(tmp_path / "e.csv", text)
    layout = sniff(path, make_config().input)
    assert layout.units == ["ms", "kg/h", "kg/h", "%", "%"] and layout.data_line == 2
    run = read_run(path, make_config())
    # The config leaves the time unit implicit, so the file's "ms" applies: 100 ms = 0.1 s.
    np.testing.assert_allclose(run.frame["time"], [0.0, 0.1, 0.2])
    assert run.meta.units_in["time"] == "ms"


def test_units_row_absent_and_override(tmp_path: Path) -> None:
    path = write(tmp_path / "f.csv", BASIC)
    assert sniff(path, make_config().input).units is None
    # A units row of spellings dynoqc does not know is only found with the override.
    text = "t,fuel,air,co2,o2\nsek,kilo/std,kilo/std,proz,proz\n0,1,2,3,4\n1,1,2,3,4\n2,1,2,3,4\n"
    path = write(tmp_path / "g.csv", text)
    run = read_run(path, make_config(input={"units_row": True}))
    assert len(run.frame) == 3 and run.meta.rows_dropped == 0
    np.testing.assert_allclose(run.frame["fuel_mass_flow"], [1.0, 1.0, 1.0])


def test_unit_mismatch_between_file_and_config_warns(tmp_path: Path) -> None:
    text = "t,fuel,air,co2,o2\ns,kg/h,kg/h,ppm,%\n0,1,2,3,4\n1,1,2,3,4\n2,1,2,3,4\n"
    run = read_run(write(tmp_path / "h.csv", text), make_config())
    assert any("'ppm'" in w and "co2" in w and "config unit is used" in w
               for w in run.meta.warnings)


def test_units_in_names(tmp_path: Path) -> None:
    text = "Time/ms,Speed [rpm],fuel (kg/h),air,co2,o2\n0,1500,1,2,3,4\n10,1510,1,2,3,4\n"
    text += "20,1520,1,2,3,4\n"
    assert split_name_unit("Speed [rpm]") == ("Speed", "rpm")
    assert split_name_unit("fuel (kg/h)") == ("fuel", "kg/h")
    assert split_name_unit("Time/ms") == ("Time", "ms")
    assert split_name_unit("NOx/NO ratio") == ("NOx/NO ratio", None)
    cfg = make_config({"time": {"column": "Time"}, "speed": {"column": "Speed", "unit": "rpm"},
                       "fuel_mass_flow": {"column": "fuel", "unit": "kg/h"}})
    run = read_run(write(tmp_path / "i.csv", text), cfg)
    np.testing.assert_allclose(run.frame["time"], [0.0, 0.01, 0.02])
    np.testing.assert_allclose(run.frame["speed"], [1500, 1510, 1520])
    assert run.meta.columns_in["speed"] == "Speed [rpm]"


def test_iso_timestamps_with_offset_across_dst_change(tmp_path: Path) -> None:
    # EU summer time begins on the last Sunday of March at 01:00 UTC (Directive 2000/84/EC):
    # on 2026-03-29 local time jumps from 02:00 +01:00 to 03:00 +02:00.
    text = (
        "t;fuel;air;co2;o2\n"
        "2026-03-29T01:59:59.0+01:00;1;2;3;4\n"
        "2026-03-29T01:59:59.5+01:00;1;2;3;4\n"
        "2026-03-29T03:00:00.0+02:00;1;2;3;4\n"
        "2026-03-29T03:00:00.5+02:00;1;2;3;4\n"
    )
    run = read_run(write(tmp_path / "j.csv", text), make_config())
    np.testing.assert_allclose(run.frame["time"], [0.0, 0.5, 1.0, 1.5])
    assert run.meta.start_time == datetime(2026, 3, 29, 0, 59, 59, tzinfo=UTC)
    assert run.meta.units_in["time"] == "ISO 8601"


def test_naive_timestamps_with_timezone(tmp_path: Path) -> None:
    text = "t,fuel,air,co2,o2\n2026-01-10 22:00:00,1,2,3,4\n2026-01-10 22:00:01,1,2,3,4\n"
    text += "2026-01-10 22:00:02,1,2,3,4\n"
    path = write(tmp_path / "k.csv", text)
    run = read_run(path, make_config(input={"timezone": "Europe/Berlin"}))
    # Central European (winter) time is UTC+1 (IANA tz database, Europe/Berlin).
    assert run.meta.start_time == datetime(2026, 1, 10, 21, 0, 0, tzinfo=UTC)
    run = read_run(path, make_config())
    assert run.meta.start_time == datetime(2026, 1, 10, 22, 0, 0, tzinfo=UTC)
    assert any("no UTC offset" in w for w in run.meta.warnings)
    with pytest.raises(ConfigError, match="timezone 'Mars/Olympus'"):
        read_run(path, make_config(input={"timezone": "Mars/Olympus"}))


def test_elapsed_seconds_in_minutes_unit(tmp_path: Path) -> None:
    text = "t,fuel,air,co2,o2\n0,1,2,3,4\n0.5,1,2,3,4\n1,1,2,3,4\n"
    cfg = make_config({"time": {"column": "t", "unit": "min", "format": "seconds"}})
    run = read_run(write(tmp_path / "l.csv", text), cfg)
    np.testing.assert_allclose(run.frame["time"], [0.0, 30.0, 60.0])


def test_gzip_file_and_sha256_and_file_untouched(tmp_path: Path) -> None:
    path = tmp_path / "m.csv.gz"
    data = gzip.compress(BASIC.encode())
    path.write_bytes(data)
    mtime = path.stat().st_mtime_ns
    run = read_run(path, make_config())
    np.testing.assert_allclose(run.frame["fuel_mass_flow"], [10.5, 10.6, 10.7])
    assert run.meta.sha256 == hashlib.sha256(data).hexdigest()
    assert path.read_bytes() == data and path.stat().st_mtime_ns == mtime


def test_utf8_bom(tmp_path: Path) -> None:
    path = tmp_path / "n.csv"
    path.write_bytes(b"\xef\xbb\xbf" + BASIC.encode())
    run = read_run(path, make_config())
    assert run.meta.columns_in["time"] == "t"
    np.testing.assert_allclose(run.frame["time"], [0.0, 0.1, 0.2])


def test_cp1252_degree_sign_in_names_and_units(tmp_path: Path) -> None:
    text = (
        "t;fuel;air;co2;o2;Temp. Ansaugluft [°C];Öl\n"
        "s;kg/h;kg/h;%;%;;K\n"
        "0;1;2;3;4;20,5;363,15\n1;1;2;3;4;21,5;364,15\n2;1;2;3;4;22,5;365,15\n"
    )
    path = write(tmp_path / "o.csv", text, encoding="cp1252")
    cfg = make_config({
        "ambient_temperature": {"column": "Temp. Ansaugluft", "unit": "degC"},
        "sample_line_temperature": {"column": "Öl", "unit": "K"},
    })
    run = read_run(path, cfg)
    np.testing.assert_allclose(run.frame["ambient_temperature"], [20.5, 21.5, 22.5])
    # SI: t/degC = T/K - 273.15.
    np.testing.assert_allclose(run.frame["sample_line_temperature"], [90.0, 91.0, 92.0])
    assert run.meta.columns_in["ambient_temperature"] == "Temp. Ansaugluft [°C]"


def test_utf16_tab_export(tmp_path: Path) -> None:
    path = tmp_path / "p.txt"
    path.write_bytes(BASIC.replace(",", "\t").encode("utf-16"))
    run = read_run(path, make_config())
    np.testing.assert_allclose(run.frame["air_mass_flow"], [300.0, 301.0, 302.0])


def test_bad_and_missing_cells_counted(tmp_path: Path) -> None:
    text = (
        "t,fuel,air,co2,o2\n"
        "0,1,2,3,4\n1,OVL,2,3,---\n2,1,2,3,#N/A\n3,1,2,3,\n4,err,2,3,NaN\n5,1,2,inf,4\n"
    )
    run = read_run(write(tmp_path / "q.csv", text), make_config())
    assert run.meta.bad_cells == {"fuel_mass_flow": 2, "co2": 1}
    assert np.isnan(run.frame["fuel_mass_flow"]).sum() == 2
    assert np.isnan(run.frame["o2"]).sum() == 4
    assert not np.isinf(run.frame.to_numpy()).any()
    assert any("'fuel'" in w and "2 non-numeric" in w and "'OVL'" in w for w in run.meta.warnings)
    assert any("'o2'" in w and "4 empty or missing-marker" in w for w in run.meta.warnings)
    assert len(run.frame) == 6


def test_missing_column_message(tmp_path: Path) -> None:
    path = write(tmp_path / "r.csv", BASIC.replace("co2", "CO2_dry"))
    with pytest.raises(InputDataError, match=r"column 'co2' \(\[channels.co2\] column\) is not "
                                             r"in the names row.*'CO2_dry'"):
        read_run(path, make_config())


def test_wrong_dimension_unit_found_at_config_load() -> None:
    with pytest.raises(ConfigError, match=r"test.toml: \[channels.torque\] unit: unit 'kg/h' is a "
                                          r"mass flow unit, but torque needs a torque unit"):
        make_config({"torque": {"column": "trq", "unit": "kg/h"}})


def test_wrong_dimension_unit_in_file_with_implicit_config_unit(tmp_path: Path) -> None:
    # The config leaves lambda_sensor's unit implicit; the file's units row says kg/h: that
    # unit does not fit, so the config's (canonical) unit is used and nothing is converted.
    text = ("t,fuel,air,co2,o2,lam\ns,kg/h,kg/h,%,%,kg/h\n"
            "0,1,2,3,4,1.5\n1,1,2,3,4,1.5\n2,1,2,3,4,1.5\n")
    run = read_run(write(tmp_path / "s.csv", text),
                   make_config({"lambda_sensor": {"column": "lam"}}))
    np.testing.assert_allclose(run.frame["lambda_sensor"], 1.5)


def test_decimal_mismatch_names_column_and_found(tmp_path: Path) -> None:
    text = "t;fuel;air;co2;o2\n0;10,5;300;13;1\n1;10,5;300;13;1\n2;10,5;300;13;1\n"
    with pytest.raises(InputDataError, match=r"column 'fuel'.*holds no numbers; found '10,5'.*"
                                             r"decimal '\.'"):
        read_run(write(tmp_path / "t.csv", text), make_config(input={"decimal": "."}))


def test_optional_channel_empty_warns(tmp_path: Path) -> None:
    text = "t,fuel,air,co2,o2,nox\n0,1,2,3,4,\n1,1,2,3,4,\n2,1,2,3,4,\n"
    cfg = make_config({"nox": {"column": "nox", "unit": "ppm", "basis": "wet"}})
    run = read_run(write(tmp_path / "u.csv", text), cfg)
    assert np.isnan(run.frame["nox"]).all()
    assert any("'nox' (nox) holds no numbers" in w for w in run.meta.warnings)


def test_time_policy_nan_duplicates_spike_and_restart(tmp_path: Path) -> None:
    text = "t,fuel,air,co2,o2\n" + "".join(
        f"{t},{i},2,3,4\n" for i, t in enumerate(["0", "1", "1", "2", "", "0", "1", "0.5"])
    )
    run = read_run(write(tmp_path / "v.csv", text), make_config())
    # Kept rows in file order: 0, 1, (dup 1 dropped), 2, (no time dropped), restart 0 -> 3
    # (one median interval, 1 s, after the previous sample), (1 is a spike between 0 and 0.5:
    # dropped), 0.5 -> 3.5.
    np.testing.assert_allclose(run.frame["time"], [0, 1, 2, 3, 3.5])
    np.testing.assert_allclose(run.frame["fuel_mass_flow"], [0, 1, 3, 5, 7])
    assert run.meta.rows_read == 8 and run.meta.rows_dropped == 3
    assert len(run.frame) == run.meta.rows_read - run.meta.rows_dropped
    assert any("backwards 1 time(s)" in w for w in run.meta.warnings)
    assert any("1 row(s) written out of order" in w for w in run.meta.warnings)
    assert any("repeating the previous row's time" in w for w in run.meta.warnings)
    assert any("without a readable time" in w for w in run.meta.warnings)


def test_monotone_time_vectorised_policy() -> None:
    t = np.array([10.0, 10.2, 10.4, 10.4, 0.0, 0.2, 0.2, 0.4])
    new, idx, stats = monotone_time(t)
    np.testing.assert_allclose(new, [10.0, 10.2, 10.4, 10.6, 10.8, 11.0])
    np.testing.assert_array_equal(idx, [0, 1, 2, 4, 5, 7])
    assert stats["duplicates"] == 2 and stats["restarts"] == 1
    assert np.all(np.diff(new) > 0)


def test_swapped_rows_are_dropped_not_shifted() -> None:
    t = np.arange(100.0)
    t[[40, 41]] = t[[41, 40]]
    new, idx, stats = monotone_time(t)
    assert stats == {"duplicates": 0, "out_of_order": 1, "restarts": 0, "interval": 1.0}
    # Every kept row keeps its own time: nothing after the swap is shifted.
    np.testing.assert_array_equal(new, t[idx])
    assert idx.size == 99


def test_time_spike_dropped_and_nested_restarts_follow_on() -> None:
    t = np.concatenate([np.arange(100.0), np.arange(50.0), np.arange(30.0)])
    t[10] = 1e6  # one garbage time stamp
    t[120], t[121] = t[121], t[120]  # a swap inside the first restarted segment
    new, idx, stats = monotone_time(t)
    assert stats["out_of_order"] == 2 and stats["restarts"] == 2
    assert np.all(np.diff(new) > 0)
    assert idx.size == t.size - 2
    # The restarted segments follow on one interval after the previous segment's end.
    np.testing.assert_allclose(new[98:100], [99.0, 100.0])  # row 10 was dropped
    np.testing.assert_allclose(new[-1], 99 + 1 + 49 + 1 + 29)


def test_thc_carbon_number_and_value_channel(tmp_path: Path) -> None:
    text = "t,fuel,air,co2,o2,hc\n0,1,2,3,4,100\n1,1,2,3,4,100\n2,1,2,3,4,100\n"
    cfg = make_config({
        "thc": {"column": "hc", "unit": "ppm", "basis": "wet", "carbon_number": 3},
        "ambient_pressure": {"value": 1013.25, "unit": "hPa"},
    })
    run = read_run(write(tmp_path / "w.csv", text), cfg)
    # 100 ppm propane-equivalent = 300 ppmC = 300e-6 mol/mol on a C1 basis (3 C per C3H8).
    np.testing.assert_allclose(run.frame["thc"], [300e-6] * 3, rtol=1e-12)
    # Standard atmosphere 1013.25 hPa = 101.325 kPa (ISO 2533).
    np.testing.assert_allclose(run.frame["ambient_pressure"], [101.325] * 3, rtol=1e-12)
    cfg = make_config({"thc": {"column": "hc", "unit": "ppmC", "basis": "wet",
                               "carbon_number": 3}})
    with pytest.raises(ConfigError, match="already on a C1 basis"):
        read_run(tmp_path / "w.csv", cfg)


def test_volumetric_fuel_flow_uses_density(tmp_path: Path) -> None:
    text = "t,fuel,air,co2,o2\n0,1,2,3,4\n1,2,2,3,4\n2,3,2,3,4\n"
    cfg = make_config({"fuel_mass_flow": {"column": "fuel", "unit": "l/h"}},
                      fuel={"preset": "gasoline", "density_kg_per_m3": 745.0})
    run = read_run(write(tmp_path / "x.csv", text), cfg)
    np.testing.assert_allclose(run.frame["fuel_mass_flow"], [0.745, 1.49, 2.235], rtol=1e-12)


@pytest.mark.parametrize(
    ("content", "message"),
    [
        (b"", "empty"),
        (b"t,fuel,air,co2,o2\n", "no data rows"),
        (b"t,fuel,air,co2,o2\ns,kg/h,kg/h,%,%\n", "no data rows"),
        (b"\x89HDF\r\n\x1a\n\x00\x00\x00\x00\x00\x08\x08\x00", "not a text file"),
        (bytes(range(256)) * 8, "not a text file"),
    ],
)
def test_unusable_files(tmp_path: Path, content: bytes, message: str) -> None:
    path = tmp_path / "bad.csv"
    path.write_bytes(content)
    with pytest.raises(InputDataError, match=message) as info:
        read_run(path, make_config())
    assert "bad.csv" in str(info.value)


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(InputDataError, match="nope.csv: file not found"):
        read_run(tmp_path / "nope.csv", make_config())


# Property test: random frames written in random layouts read back to the same values.

MARKERS = ["", "NaN", "---", "#N/A", "NA", "n/a", "nan"]


@st.composite
def logger_files(draw: st.DrawFn) -> tuple[str, np.ndarray, dict[str, Any]]:
    n = draw(st.integers(min_value=3, max_value=30))
    # Within the physical limits of ingest (flows in kg/h; co2, o2 in % up to 100 %).
    bounds = [(-1e3, 1e6), (-1e4, 1e6), (-100.0, 100.0), (-100.0, 100.0)]
    values = np.array([
        [draw(st.floats(min_value=lo, max_value=hi, allow_nan=False, allow_subnormal=False))
         for lo, hi in bounds]
        for _ in range(n)
    ]).reshape(n, 4)
    mask = np.array(draw(st.lists(st.booleans(), min_size=4 * n, max_size=4 * n))).reshape(n, 4)
    # Keep at least one number in the must-have flow columns.
    mask[0, :2] = False
    values = np.where(mask, np.nan, values)
    dt = draw(st.sampled_from([0.1, 0.5, 1.0, 0.01]))
    time = np.round(np.arange(n) * dt + draw(st.floats(0, 1000)), 6)
    delimiter = draw(st.sampled_from([",", ";", "\t"]))
    decimal = draw(st.sampled_from([".", ","])) if delimiter != "," else "."
    units_row = draw(st.booleans())
    comments = draw(st.integers(0, 3))
    marker = draw(st.sampled_from(MARKERS))
    newline = draw(st.sampled_from(["\n", "\r\n"]))

    def cell(x: float) -> str:
        if math.isnan(x):
            return marker
        return repr(float(x)).replace(".", decimal)

    lines = [f"# comment {i}" for i in range(comments)]
    lines.append(delimiter.join(["t", "fuel", "air", "co2", "o2"]))
    if units_row:
        lines.append(delimiter.join(["s", "kg/h", "kg/h", "%", "%"]))
    for i in range(n):
        lines.append(delimiter.join([cell(time[i])] + [cell(v) for v in values[i]]))
    expected = np.column_stack([time, values])
    info = {"delimiter": delimiter, "decimal": decimal, "units_row": units_row}
    return newline.join(lines) + newline, expected, info


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(logger_files())
def test_random_layouts_round_trip(case: tuple[str, np.ndarray, dict[str, Any]]) -> None:
    text, expected, info = case
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "run.csv"
        path.write_bytes(text.encode("utf-8"))
        layout = sniff(path, make_config().input)
        assert layout.delimiter == info["delimiter"]
        assert (layout.units is not None) == info["units_row"]
        run = read_run(path, make_config())
    got = run.frame[["time", "fuel_mass_flow", "air_mass_flow", "co2", "o2"]].to_numpy()
    want = expected.copy()
    want[:, 3:] *= 1e-2  # % -> mol/mol
    np.testing.assert_array_equal(np.isnan(got), np.isnan(want))
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=0)
    assert run.meta.bad_cells == {}


def test_trailing_delimiters_quoted_names_and_cut_last_line(tmp_path: Path) -> None:
    text = '"t";"fuel";"air";"co2";"o2"\n0;1;2;3;4;\n1;1;2;3;4;\n2;1;2;3;4;\n3;1;2'
    run = read_run(write(tmp_path / "y.csv", text), make_config())
    np.testing.assert_allclose(run.frame["time"], [0, 1, 2, 3])
    np.testing.assert_allclose(run.frame["air_mass_flow"], [2, 2, 2, 2])
    assert np.isnan(run.frame["co2"].iloc[-1]) and run.meta.bad_cells == {}
    assert run.meta.missing_cells == {"co2": 1, "o2": 1}  # the cut last line
    assert any("1 empty" in w and "'co2'" in w for w in run.meta.warnings)
