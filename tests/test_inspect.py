"""``dynoqc inspect``: columns, ranges, the config's mapping, and a proposed config."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from conftest import ROOT

from pipeline.cli import main
from pipeline.config import load_config
from pipeline.inspection import ColumnInfo, inspect_run, propose_channels, tokens

SAMPLE = ROOT / "sample_runs" / "cell_b3_2026-03-14.csv.gz"
CONFIG = ROOT / "configs" / "cell_b3.toml"


def test_columns_with_units_ranges_and_missing_counts() -> None:
    doc = json.loads(inspect_run(SAMPLE, None, True, None)[0])
    assert doc["format"] == "CSV" and doc["rows"] == 36001
    cols = {c["name"]: c for c in doc["columns"]}
    assert cols["fuel_flow"]["unit"] == "kg/h" and cols["fuel_flow"]["missing"] == 62
    assert cols["baro"]["minimum"] == pytest.approx(98.322)
    assert cols["baro"]["maximum"] == pytest.approx(98.926)
    assert doc["metadata"]["start_time"] == "2026-03-14T21:00:00Z"


def test_proposal_reproduces_the_hand_written_config(tmp_path: Path) -> None:
    target = tmp_path / "proposed.toml"
    res = CliRunner().invoke(main, ["inspect", str(SAMPLE), "--write", str(target)])
    assert res.exit_code == 0, res.output
    proposed = load_config(target)  # it loads as it is (fuel from the file's metadata)
    hand = load_config(CONFIG)
    assert proposed.fuel.name == hand.fuel.name
    for q, ch in hand.channels.items():
        got = proposed.channels[q]
        assert (got.column, got.basis) == (ch.column, ch.basis), q
    # Never overwrite: a second --write to the same file is refused with exit 2.
    before = target.read_bytes()
    res = CliRunner().invoke(main, ["inspect", str(SAMPLE), "--write", str(target)])
    assert res.exit_code == 2 and "exists and was not overwritten" in res.stderr
    assert target.read_bytes() == before


def test_mapping_with_config_shows_unmapped_and_process_outcome(tmp_path: Path) -> None:
    res = CliRunner().invoke(main, ["inspect", str(SAMPLE), "--config", str(CONFIG)])
    assert res.exit_code == 0, res.output
    assert "fuel_mass_flow" in res.stdout and "<- fuel_flow" in res.stdout
    assert "unmapped columns: none" in res.stdout
    assert "dynoqc process would read 36001 rows" in res.stdout
    # A config naming a column that is not there: shown, not a crash.
    cfg = tmp_path / "c.toml"
    cfg.write_text(CONFIG.read_text().replace('column = "nox_dry"', 'column = "nox"'))
    doc = json.loads(CliRunner().invoke(
        main, ["inspect", str(SAMPLE), "--config", str(cfg), "--json"]).stdout)
    status = {r["quantity"]: r["status"] for r in doc["mapping"]}
    assert status["nox"].startswith("MISSING") and status["co2"] == "ok"
    assert "nox_dry" in doc["unmapped"]
    assert doc["process"]["exit_code"] == 3 and "column 'nox'" in doc["process"]["error"]


def info(name: str, unit: str | None, lo: float = 0.0, hi: float = 1.0,
         kind: str = "number", increasing: bool = False) -> ColumnInfo:
    return ColumnInfo(name, unit, kind, 10, 0, 0, lo, hi, increasing=increasing)


def test_matching_by_names_and_units() -> None:
    cols = [
        info("Zeit", None, 0, 100, increasing=True),
        info("EngineSpeed [rpm]", "rpm", 800, 4000),
        info("Trq", "kg/h", 0, 300),  # a torque name with a mass-flow unit: not torque
        info("FuelRate", None, 1, 20),
        info("MAF", "kg/h", 50, 400),
        info("CO2_wet", None, 0, 14),
        info("O2dry", None, 0, 0.21),
        info("NOx_ppm", None, 0, 900),
        info("HC_hot", "ppm", 0, 300),
        info("oil_temp", "degC", 80, 120),
        info("T_cell", "degC", 20, 25),
        info("p_baro", None, 980, 990),
        info("cell RH", "%", 30, 60),
        info("bench_status", None, 0, 3),
    ]
    p = propose_channels(cols)
    assert p["time"].column == "Zeit" and any("content" in c for c in p["time"].checks)
    assert p["speed"].column == "EngineSpeed [rpm]" and p["speed"].unit == "rpm"
    assert "torque" not in p
    assert p["fuel_mass_flow"].column == "FuelRate" and p["fuel_mass_flow"].checks
    assert p["air_mass_flow"].column == "MAF" and p["air_mass_flow"].basis == "wet"
    assert (p["co2"].basis, p["co2"].unit) == ("wet", "%")
    assert (p["o2"].basis, p["o2"].unit) == ("dry", "mol/mol")
    assert p["nox"].unit == "ppm" and any(c.startswith("basis") for c in p["nox"].checks)
    assert p["thc"].basis == "wet" and any("carbon_number" in c for c in p["thc"].checks)
    assert p["ambient_temperature"].column == "T_cell"  # not the oil temperature
    assert p["ambient_pressure"].unit == "hPa"
    assert p["ambient_humidity"].column == "cell RH"
    assert p["analyzer_mode"].column == "bench_status"


def test_tokens() -> None:
    toks = tokens("NOxDry [ppm]")  # the unit is not a token; camelCase and the whole word
    assert "ppm" not in toks and {"dry", "noxdry"} <= set(toks)
    assert tokens("cell_air_temp") == ["cell", "air", "temp", "cellairtemp"]


def test_inspect_refuses_write_with_config_and_reads_parquet(tmp_path: Path) -> None:
    res = CliRunner().invoke(main, ["inspect", str(SAMPLE), "--config", str(CONFIG),
                                    "--write", str(tmp_path / "x.toml")])
    assert res.exit_code == 2 and not (tmp_path / "x.toml").exists()
    import pandas as pd

    pq = tmp_path / "n.parquet"
    pd.DataFrame({"time": np.arange(5.0), "fuel": np.ones(5)}).to_parquet(pq)
    doc = json.loads(inspect_run(pq, None, True, None)[0])
    assert doc["format"] == "Parquet" and doc["rows"] == 5
    assert doc["proposal"]["time"]["column"] == "time"
    assert "air_mass_flow" in doc["not_found"]


def test_inspect_unreadable_file_exit_3(tmp_path: Path) -> None:
    bad = tmp_path / "empty.csv"
    bad.write_bytes(b"")
    res = CliRunner().invoke(main, ["inspect", str(bad)])
    assert res.exit_code == 3 and "the file is empty" in res.stderr


def test_german_names_hot_fid_and_a_gauge_exhaust_pressure() -> None:
    # Channel names of a German export (our invented one) map; a FID column is proposed
    # "wet" (a heated FID sees the hot sample, common practice); an exhaust pressure of
    # 5-33 kPa cannot be absolute and is marked for checking.
    def col(name: str, unit: str, lo: float, hi: float) -> ColumnInfo:
        return ColumnInfo(name, unit, "number", 100, 0, 0, minimum=lo, maximum=hi,
                          increasing=name == "Zeit")

    cols = [col("Zeit", "s", 0, 99), col("Drehzahl", "1/min", 800, 3000),
            col("Drehmoment", "Nm", 10, 300), col("Kraftstoff", "kg/h", 1, 20),
            col("Luftmasse", "kg/h", 50, 700), col("CO2 tr", "%", 2, 12),
            col("O2 tr", "%", 2, 16), col("THC FID", "ppmC", 10, 300),
            col("Abgasdruck", "kPa", 5, 33)]
    p = propose_channels(cols)
    assert p["speed"].column == "Drehzahl" and p["torque"].column == "Drehmoment"
    assert p["fuel_mass_flow"].column == "Kraftstoff"
    assert p["air_mass_flow"].column == "Luftmasse"
    assert p["co2"].basis == "dry" and p["thc"].basis == "wet"
    assert any("gauge" in c for c in p["exhaust_pressure"].checks)
