"""Nights shaped like real cell exports: engine stops, mixed logging rates, rollover files.

The fixtures start from a clean forward-model night and are then edited by hand the way a
real log looks (engine stopped with the bench still sampling room air, the wide-band sensor
reading its "in air" value, the fuel meter's zero scatter); what the checks must do there is
common practice: a stopped engine is not an instrument fault.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import SAMPLE_CONFIG

from pipeline import process_run
from pipeline.states import ENGINE_OFF, ENGINE_STARTING
from pipeline.testing.cell_b3 import METADATA, cell_b3_scenario
from pipeline.testing.simulate import make_night, write_csv

#: Two stops of the invented night: (start h, length s).
STOPS = ((1.2, 1200.0), (2.6, 900.0))


def _with_stops(log: pd.DataFrame, rng: np.random.Generator) -> pd.DataFrame:
    """Engine stopped: 0 rpm and torque, the fuel meter's zero scatter, a trickle of draught
    through the air meter, room air at the analyzers (about 400 umol/mol CO2, 20.9 % O2), the
    wide-band sensor at its in-air value 32.767 (common practice for such sensors). The
    exhaust left in the pipes and sample line washes out over a few minutes (time constant
    60 s), so the analyzers read falling CO2 and rising O2 while nothing burns."""
    log = log.copy()
    t = log["time"].to_numpy()
    for start_h, length in STOPS:
        off = (t >= start_h * 3600) & (t < start_h * 3600 + length)
        k = int(off.sum())
        i0 = int(np.flatnonzero(off)[0])
        co2_0, o2_0 = float(log["co2_dry"].iloc[i0 - 1]), float(log["o2_dry"].iloc[i0 - 1])
        wash = np.exp(-(t[off] - t[i0]) / 60.0)
        log.loc[off, "engine_speed"] = 0.0
        log.loc[off, "engine_torque"] = rng.normal(0.0, 0.3, k).round(1)
        log.loc[off, "fuel_flow"] = rng.normal(0.004, 0.003, k).round(3)
        log.loc[off, "air_flow"] = rng.normal(1.5, 0.4, k).round(1)
        log.loc[off, "co2_dry"] = (0.041 + (co2_0 - 0.041) * wash
                                   + rng.normal(0, 0.002, k)).round(3)
        log.loc[off, "co_dry"] = rng.normal(2.0, 1.0, k).round(0)
        log.loc[off, "o2_dry"] = (20.93 - (20.93 - o2_0) * wash
                                  + rng.normal(0, 0.02, k)).round(3)
        log.loc[off, "nox_dry"] = rng.normal(0.5, 0.5, k).round(0)
        log.loc[off, "thc_hot"] = rng.normal(3.0, 1.0, k).round(1)
        log.loc[off, "lambda_wb"] = 32.767
    return log


@pytest.fixture(scope="module")
def stop_night(tmp_path_factory: pytest.TempPathFactory) -> Path:
    sc = dataclasses.replace(cell_b3_scenario(), duration_h=4.0, faults=[], cal_windows=[],
                             dropouts=[], line_heater_trips=[], seed=11)
    log, _ = make_night(sc)
    log = _with_stops(log, np.random.default_rng(3))
    path = tmp_path_factory.mktemp("stops") / "stops.csv"
    write_csv(log, path, units=log.attrs["units"], metadata=METADATA)
    return path


def test_engine_stops_are_no_instrument_fault(stop_night: Path) -> None:
    res = process_run(stop_night, SAMPLE_CONFIG)
    verdicts = res.tables["verdicts"]
    assert set(verdicts["status"]) == {"ok"}, verdicts[["instrument", "line"]]
    flags = res.flags
    assert list(flags["check"]).count("engine_off") == len(STOPS)
    assert len(flags) < 20
    t = res.series["time"].to_numpy()
    state = res.series["engine_state"].to_numpy()
    for start_h, length in STOPS:
        inside = (t >= start_h * 3600 + 5) & (t < start_h * 3600 + length - 5)
        assert (state[inside] == ENGINE_OFF).all()
        after = (t > start_h * 3600 + length + 5) & (t < start_h * 3600 + length + 60)
        assert (state[after] == ENGINE_STARTING).all()
        # no lambda where the engine is off: the estimates mean nothing there
        for name in ("lambda_flow", "lambda_carbon", "lambda_oxygen"):
            assert np.isnan(res.series[name].to_numpy()[inside]).all(), name
    # no steady point of a stopped engine, and no brake-specific value of one
    pts = res.tables["steady_points"]
    assert (pts["speed_mean"] > 500).all()
    em = res.tables["emissions"]
    assert (em["bsfc_g_per_kWh"].dropna() < 1000).all()


#: Columns the (invented) analyzer bench writes at 1 Hz into the 10 Hz log.
BENCH = ("co2_dry", "co_dry", "o2_dry", "nox_dry", "thc_hot")


def test_a_1hz_bench_in_a_10hz_log_is_held_not_a_gap(tmp_path: Path) -> None:
    # Common practice of merged logs: the slow device's cells stay empty between its
    # updates. A real silence of the bench (40 s) is still one gap.
    sc = dataclasses.replace(cell_b3_scenario(), duration_h=1.5, rate_hz=10.0, faults=[],
                             cal_windows=[], dropouts=[], line_heater_trips=[], seed=5)
    log, _ = make_night(sc)
    rows = np.arange(len(log))
    for col in BENCH:
        log[col] = log[col].astype(object)
        log.loc[rows % 10 != 3, col] = ""
    silent = (log["time"] >= 2400.0) & (log["time"] < 2440.0)
    for col in BENCH:
        log.loc[silent, col] = ""
    path = tmp_path / "mixed.csv"
    write_csv(log, path, units=log.attrs["units"], metadata=METADATA)
    res = process_run(path, SAMPLE_CONFIG)
    gaps = res.flags[res.flags["check"] == "data_gap"]
    assert len(gaps) == 1, gaps
    assert 2395.0 <= gaps["start_s"].iloc[0] <= 2401.0 and gaps["end_s"].iloc[0] >= 2439.0
    assert set(res.tables["verdicts"]["status"]) == {"ok"}
    co2 = res.series["co2"].to_numpy()
    assert np.isfinite(co2[(res.series["time"] > 100) & (res.series["time"] < 2000)]).all()
    assert any("every 10th row" in w for w in res.attrs["warnings"])


def test_raster_s_puts_a_text_log_on_the_configured_raster(tmp_path: Path) -> None:
    # [input] raster_s holds for every format: a 1 Hz text log on a 2 s raster.
    sc = dataclasses.replace(cell_b3_scenario(), duration_h=0.5, faults=[], cal_windows=[],
                             dropouts=[], line_heater_trips=[], seed=8)
    log, _ = make_night(sc)
    path = tmp_path / "n.csv"
    write_csv(log, path, units=log.attrs["units"], metadata=METADATA)
    text = SAMPLE_CONFIG.read_text().replace("[input]", "[input]\nraster_s = 2.0", 1)
    assert "raster_s = 2.0" in text
    cfg = tmp_path / "c.toml"
    cfg.write_text(text)
    res = process_run(path, cfg)
    t = res.series["time"].to_numpy()
    assert np.allclose(np.diff(t), 2.0) and t.size == 901
    # linear between the rows: the value at 2 s is the logged row at 2 s
    np.testing.assert_allclose(res.series["fuel_mass_flow"].to_numpy()[1],
                               float(log["fuel_flow"].iloc[2]), rtol=1e-12)


def _split_night(log: pd.DataFrame, folder: Path, hours: float) -> list[Path]:
    """The night as the logger's rollover files: a new file every ``hours``, each with its
    own start time line and its elapsed time from 0 (how such loggers write them)."""
    from datetime import datetime, timedelta

    start = datetime.fromisoformat(METADATA["start_time"].replace("Z", "+00:00"))
    t = log["time"].to_numpy()
    paths = []
    for k, t0 in enumerate(np.arange(0.0, t[-1], hours * 3600.0)):
        part = log[(t >= t0) & (t < t0 + hours * 3600.0)].copy()
        part["time"] = part["time"] - t0
        meta = dict(METADATA, start_time=(start + timedelta(seconds=float(t0))).isoformat())
        path = folder / f"night_part{k + 1}.csv"
        write_csv(part, path, units=log.attrs["units"], metadata=meta)
        paths.append(path)
    return paths


def test_rollover_files_joined_find_the_drift_across_files(tmp_path: Path) -> None:
    # The demo night's CO2 span drift (-4 % from 03:10 UTC over 2 h) split over five 2 h
    # files: each file alone has its own baseline; joined, the drift is found across them.
    from click.testing import CliRunner

    from pipeline.cli import main
    from pipeline.result import read_result

    log, _ = make_night(cell_b3_scenario())
    parts = _split_night(log, tmp_path, 2.0)
    shuffled = [str(p) for p in (parts[3], parts[0], parts[4], parts[2], parts[1])]
    out = tmp_path / "out"
    r = CliRunner().invoke(main, ["process", *shuffled, "--join", "--config",
                                  str(SAMPLE_CONFIG), "--out", str(out), "--no-plots"])
    assert r.exit_code == 0, r.output
    # one result, named after the config's [run] name (the first file's name without one)
    res = read_result(out / "cell_b3_2026-03-14.h5")
    t = res.timeseries["time"].to_numpy()
    assert t[0] == 0.0 and t[-1] == pytest.approx(10 * 3600.0 - 1.0)
    v = res.tables["verdicts"].set_index("instrument")
    assert v.loc["co2", "status"] == "suspect"
    onset_h = v.loc["co2", "onset_s"] / 3600.0
    assert abs(onset_h - (6.0 + 10.0 / 60.0)) < 0.5
    assert "5 rollover files joined" in " ".join(res.attrs["warnings"])
    assert res.attrs["run_name"] == "cell_b3_2026-03-14"


def test_us_units_and_a_gauge_exhaust_pressure(tmp_path: Path) -> None:
    # A US export of the same night: fuel in lb/hr, torque in lb-ft, exhaust back pressure
    # in psig. Factors: 1 lb = 0.45359237 kg (1959 agreement), 1 lbf.ft = 1.355818 N.m and
    # 1 psi = 6.894757 kPa (NIST SP 811, 2008). The gauge reading gets the ambient added.
    sc = dataclasses.replace(cell_b3_scenario(), duration_h=0.5, faults=[], cal_windows=[],
                             dropouts=[], line_heater_trips=[], seed=9)
    log, _ = make_night(sc)
    us = log.copy()
    us["fuel_flow"] = (log["fuel_flow"] / 0.45359237).round(4)
    us["engine_torque"] = (log["engine_torque"] / 1.355818).round(2)
    us["exh_p"] = 2.0
    units = dict(log.attrs["units"], fuel_flow="lb/hr", engine_torque="lb-ft", exh_p="psig")
    path = tmp_path / "us.csv"
    write_csv(us, path, units=units, metadata=METADATA)
    text = SAMPLE_CONFIG.read_text()
    text += '\n[channels.exhaust_pressure]\ncolumn = "exh_p"\n'
    cfg = tmp_path / "us.toml"
    cfg.write_text(text.replace('unit = "kg/h"', 'unit = "lb/hr"', 1)
                   .replace('unit = "N.m"', 'unit = "lb-ft"', 1))
    res = process_run(path, cfg)
    si = process_run(_si(log, tmp_path), SAMPLE_CONFIG)
    np.testing.assert_allclose(res.series["fuel_mass_flow"], si.series["fuel_mass_flow"],
                               rtol=1e-4)
    np.testing.assert_allclose(res.series["torque"], si.series["torque"], rtol=1e-3, atol=0.01)
    np.testing.assert_allclose(res.series["exhaust_pressure"],
                               si.series["ambient_pressure"] + 2.0 * 6.894757, rtol=1e-6)
    assert any("gauge pressure" in w for w in res.attrs["warnings"])


def _si(log: pd.DataFrame, folder: Path) -> Path:
    path = folder / "si.csv"
    write_csv(log, path, units=log.attrs["units"], metadata=METADATA)
    return path


def test_german_export_with_date_and_time_columns_through_the_autumn_change(
    tmp_path: Path,
) -> None:
    # A naive local clock (Europe/Berlin) in two columns, day first, semicolons and decimal
    # commas, through the night the clocks go back (2026-10-25 03:00 CEST -> 02:00 CET, EU
    # summer-time rule): the hour 02:00-03:00 is logged twice and no row may be lost.
    start = "2026-10-24T23:30:00Z"  # 01:30 CEST
    sc = dataclasses.replace(cell_b3_scenario(), duration_h=2.0, faults=[], cal_windows=[],
                             dropouts=[], line_heater_trips=[], seed=21, start_time=start)
    log, _ = make_night(sc)
    utc = pd.Timestamp(start) + pd.to_timedelta(log["time"], unit="s")
    local = utc.dt.tz_convert("Europe/Berlin")
    de = log.drop(columns="time")
    de.insert(0, "Uhrzeit", local.dt.strftime("%H:%M:%S"))
    de.insert(0, "Datum", local.dt.strftime("%d.%m.%Y"))
    units = dict(log.attrs["units"], Datum="", Uhrzeit="")
    units.pop("time")
    path = tmp_path / "de.csv"
    write_csv(de, path, units=units, delimiter=";", decimal=",", metadata={"Prüfstand": "B3"})
    text = SAMPLE_CONFIG.read_text()
    text = text.replace('[channels.time]\ncolumn = "time"\nunit = "s"',
                        '[channels.time]\ncolumn = ["Datum", "Uhrzeit"]')
    text = text.replace('delimiter = ","', 'delimiter = ";"').replace('decimal = "."',
                                                                       'decimal = ","')
    text = text.replace("[input]", '[input]\ntimezone = "Europe/Berlin"', 1)
    cfg = tmp_path / "de.toml"
    cfg.write_text(text)
    res = process_run(path, cfg)
    t = res.series["time"].to_numpy()
    assert t.size == len(log)  # the repeated hour is kept, both copies
    np.testing.assert_allclose(np.diff(t), 1.0)
    assert res.attrs["start_time_utc"] == "2026-10-24T23:30:00Z"
    assert not (res.flags["check"] == "data_gap").any()
    assert any("repeats" in w for w in res.attrs["warnings"])
    assert set(res.tables["verdicts"]["status"]) == {"ok"}


def test_us_start_line_gives_the_start_time(tmp_path: Path) -> None:
    # "Start: 11/02/2026 9:00:00 PM" (US month/day, 12 h clock) in a local time zone.
    sc = dataclasses.replace(cell_b3_scenario(), duration_h=0.2, faults=[], cal_windows=[],
                             dropouts=[], line_heater_trips=[], seed=4)
    log, _ = make_night(sc)
    path = tmp_path / "us.csv"
    write_csv(log, path, units=log.attrs["units"], metadata={"Start": "11/02/2026 9:00:00 PM"})
    text = SAMPLE_CONFIG.read_text().replace("[input]", '[input]\ntimezone = "America/Detroit"',
                                             1)
    cfg = tmp_path / "us.toml"
    cfg.write_text(text)
    res = process_run(path, cfg)
    # 9 PM EST (UTC-5 after 1 Nov 2026) is 02:00 UTC the next day
    assert res.attrs["start_time_utc"] == "2026-11-03T02:00:00Z"


def test_text_bench_states_are_read_as_states(tmp_path: Path) -> None:
    # A German bench writes its state as words (our invented export; the words are those a
    # German bench display uses: MESS, NULL, SPAN, SPUELEN). They are states, not bad cells.
    from pipeline.states import BENCH_SAMPLE, BENCH_SPAN, BENCH_ZERO
    from pipeline.testing.simulate import CalWindow

    sc = dataclasses.replace(cell_b3_scenario(), duration_h=1.0, faults=[], dropouts=[],
                             cal_windows=[CalWindow(start_h=0.5)], line_heater_trips=[],
                             seed=13)
    log, _ = make_night(sc)
    words = {0: "MESS", 1: "NULL", 2: "SPAN", 3: "SPUELEN"}
    log["bench_mode"] = log["bench_mode"].map(lambda v: words.get(int(v), "MESS"))
    path = tmp_path / "text_states.csv"
    write_csv(log, path, units=log.attrs["units"], metadata=METADATA)
    res = process_run(path, SAMPLE_CONFIG)
    assert "analyzer_mode" not in res.attrs["bad_cells"]
    bench = res.series["bench_state"].to_numpy()
    mode = log["bench_mode"].to_numpy()
    assert (bench[mode == "NULL"][30:] == BENCH_ZERO).mean() > 0.9
    assert (bench[mode == "SPAN"][30:] == BENCH_SPAN).mean() > 0.9
    assert (bench[mode == "MESS"] == BENCH_SAMPLE).mean() > 0.95
    assert set(res.tables["verdicts"]["status"]) == {"ok"}


def test_an_o2_zero_shift_is_stated_in_vol_percent(tmp_path: Path) -> None:
    # +0.30 %vol on the O2 analyzer from 2 h: the verdict names the O2 analyzer and states
    # the offset in its own unit (the truth of the forward model), within 30 %.
    from pipeline.testing.simulate import Fault

    sc = dataclasses.replace(cell_b3_scenario(), duration_h=5.0, cal_windows=[],
                             dropouts=[], line_heater_trips=[], seed=17,
                             faults=[Fault("o2", "zero_shift", onset_h=2.0, size=0.003)])
    log, _ = make_night(sc)
    path = tmp_path / "o2.csv"
    write_csv(log, path, units=log.attrs["units"], metadata=METADATA)
    res = process_run(path, SAMPLE_CONFIG)
    v = res.tables["verdicts"].set_index("instrument").loc["o2"]
    assert v["status"] == "suspect"
    assert v["reads_abs"] == pytest.approx(0.003, rel=0.3)
    assert abs(v["onset_s"] / 3600.0 - 2.0) < 0.5
    assert "%vol high" in v["line"] and "%vol high" in v["evidence"]


def test_thousands_separators_in_a_decimal_comma_file(tmp_path: Path) -> None:
    # A German export writing 1.002 for 1002 rpm (common practice of spreadsheet exports):
    # read as 1002, with a note; mixed with a decimal point elsewhere: refused, never 1000x
    # off in silence.
    from pipeline.errors import InputDataError

    sc = dataclasses.replace(cell_b3_scenario(), duration_h=0.5, faults=[], cal_windows=[],
                             dropouts=[], line_heater_trips=[], seed=31)
    log, _ = make_night(sc)
    de = log.copy()
    de["engine_speed"] = [f"{v:,.0f}".replace(",", ".") for v in log["engine_speed"]]
    path = tmp_path / "de.csv"
    write_csv(de, path, units=log.attrs["units"], delimiter=";", decimal=",", metadata=METADATA)
    text = SAMPLE_CONFIG.read_text().replace('delimiter = ","', 'delimiter = ";"').replace(
        'decimal = "."', 'decimal = ","')
    cfg = tmp_path / "de.toml"
    cfg.write_text(text)
    res = process_run(path, cfg)
    np.testing.assert_allclose(res.series["speed"], log["engine_speed"].round(0), atol=0.5)
    assert any("group thousands" in w for w in res.attrs["warnings"])
    de.loc[5, "engine_speed"] = "1.5"
    write_csv(de, path, units=log.attrs["units"], delimiter=";", decimal=",", metadata=METADATA)
    with pytest.raises(InputDataError, match="column 'engine_speed'.*cannot be read"):
        process_run(path, cfg)


def test_too_little_running_is_not_enough_data(tmp_path: Path) -> None:
    # Five minutes of a night: no instrument reads "ok" on so little.
    sc = dataclasses.replace(cell_b3_scenario(), duration_h=5 / 60, faults=[], cal_windows=[],
                             dropouts=[], line_heater_trips=[], seed=2)
    log, _ = make_night(sc)
    path = tmp_path / "short.csv"
    write_csv(log, path, units=log.attrs["units"], metadata=METADATA)
    res = process_run(path, SAMPLE_CONFIG)
    v = res.tables["verdicts"]
    assert set(v["status"]) == {"not enough data"}
    assert all("not enough data to judge" in line for line in v["line"])


def test_a_file_growing_while_it_is_read_is_refused(tmp_path: Path, monkeypatch) -> None:
    # The recorded source_sha256 must stand for the bytes read: a log the logger is still
    # appending to is refused (exit 3), not recorded with a digest of other bytes.
    import pipeline.ingest as ingest
    from pipeline.errors import InputDataError

    sc = dataclasses.replace(cell_b3_scenario(), duration_h=0.2, faults=[], cal_windows=[],
                             dropouts=[], line_heater_trips=[], seed=6)
    log, _ = make_night(sc)
    path = tmp_path / "growing.csv"
    write_csv(log, path, units=log.attrs["units"], metadata=METADATA)
    real = ingest.read_csv_run

    def read_then_grow(p, cfg):  # the logger writes a row while dynoqc reads
        run = real(p, cfg)
        with open(p, "a") as fh:
            fh.write(fh.name and "720.0" + ",1" * 15 + "\n")
        return run

    monkeypatch.setattr(ingest, "read_csv_run", read_then_grow)
    with pytest.raises(InputDataError, match="changed while it was read"):
        process_run(path, SAMPLE_CONFIG)
