"""Config mistakes through ``dynoqc process``: exit 2, one message naming file, key and fix."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from click.testing import CliRunner
from conftest import ROOT

from pipeline.cli import main
from pipeline.config import load_config

SAMPLE = ROOT / "sample_runs" / "cell_b3_2026-03-14.csv.gz"
CONFIG = (ROOT / "configs" / "cell_b3.toml").read_text(encoding="utf-8")


def _line_of(text: str, needle: str) -> int:
    return text.splitlines().index(needle) + 1


RPM_LINE = _line_of(CONFIG, 'unit = "rpm"')
PRESSURE_LINE = _line_of(CONFIG, "[channels.ambient_pressure]")

BROKEN: list[tuple[str, str, list[str]]] = [
    ("syntax: unquoted text", CONFIG.replace('unit = "rpm"', "unit = rpm"),
     [f"line {RPM_LINE}", "unit = rpm", "need quotes"]),
    ("syntax: unclosed table header", CONFIG.replace(
        "[channels.ambient_pressure]", "[channels.ambient_pressure"),
     [f"line {PRESSURE_LINE}", "closing bracket"]),
    ("unknown key", CONFIG.replace('column = "baro"', 'colum = "baro"'),
     ["unknown key 'colum'", "[channels.ambient_pressure]", 'Did you mean "column"?']),
    ("unknown table", CONFIG.replace("[sampling]", "[sampeling]"),
     ["unknown table 'sampeling'", 'Did you mean "sampling"?']),
    ("unknown quantity", CONFIG.replace("[channels.torque]", "[channels.torqe]"),
     ["[channels.torqe]", 'Did you mean "torque"?']),
    ("missing required channel", re.sub(r"\[channels\.o2\][^\[]*", "", CONFIG),
     ["required channel(s) not mapped: o2"]),
    ("wrong basis", CONFIG.replace('column = "co2_dry"\nunit = "%"\nbasis = "dry"',
                                   'column = "co2_dry"\nunit = "%"\nbasis = "dryy"'),
     ["[channels.co2]", "basis = 'dryy'", 'Did you mean "dry"?']),
    ("missing basis", CONFIG.replace('column = "o2_dry"\nunit = "%"\nbasis = "dry"',
                                     'column = "o2_dry"\nunit = "%"'),
     ["[channels.o2] has no basis", 'basis = "dry"']),
    ("torque in kg/h", CONFIG.replace('unit = "N.m"', 'unit = "kg/h"'),
     ["[channels.torque] unit", "'kg/h' is a mass flow unit", "needs a torque unit",
      "Accepted spellings: N.m"]),
    ("unknown unit", CONFIG.replace('unit = "kPa"', 'unit = "kPaa"'),
     ["[channels.ambient_pressure] unit", "'kPaa' is not a known unit"]),
    ("unknown [checks] key", CONFIG + "\n[checks]\nsteady_windw_s = 30\n",
     ["unknown key 'steady_windw_s' in [checks]", 'Did you mean "steady_window_s"?']),
    ("bad units_row", CONFIG.replace("units_row = true", 'units_row = "yes"'),
     ["[input] units_row must be true or false"]),
    ("unknown encoding", CONFIG.replace('decimal = "."', 'decimal = "."\nencoding = "utf-9"'),
     ["[input] encoding 'utf-9'"]),
]


@pytest.mark.parametrize("label,text,phrases", BROKEN, ids=[b[0] for b in BROKEN])
def test_config_errors_exit_2_with_file_key_and_fix(
    tmp_path: Path, label: str, text: str, phrases: list[str]
) -> None:
    cfg = tmp_path / "cell.toml"
    cfg.write_text(text, encoding="utf-8")
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["process", str(SAMPLE), "--config", str(cfg), "--out",
                                    str(out), "--no-plots"])
    assert res.exit_code == 2, res.output
    msg = res.stderr.strip()
    assert "Traceback" not in res.output and len(msg.splitlines()) == 1
    assert msg.startswith(f"dynoqc: {cfg}")
    for p in phrases:
        assert p in msg, msg
    assert not out.exists() or not any(out.iterdir())


def test_debug_shows_the_traceback(tmp_path: Path) -> None:
    cfg = tmp_path / "cell.toml"
    cfg.write_text(CONFIG.replace('unit = "N.m"', 'unit = "kg/h"'), encoding="utf-8")
    args = ["process", str(SAMPLE), "--config", str(cfg), "--out", str(tmp_path / "o")]
    res = CliRunner().invoke(main, [*args, "--debug"])
    assert res.exit_code == 2 and "Traceback" in res.stderr
    res = CliRunner().invoke(main, args)
    assert res.exit_code == 2 and "Traceback" not in res.stderr


def test_config_not_found_and_not_utf8(tmp_path: Path) -> None:
    res = CliRunner().invoke(main, ["process", str(SAMPLE), "--config",
                                    str(tmp_path / "nope.toml")])
    assert res.exit_code == 2 and "nope.toml: config file not found" in res.stderr
    bad = tmp_path / "latin.toml"
    bad.write_bytes(CONFIG.replace("Cell B3", "Zelle B3 \xb0").encode("latin-1"))
    res = CliRunner().invoke(main, ["process", str(SAMPLE), "--config", str(bad)])
    assert res.exit_code == 2 and "not UTF-8" in res.stderr


def test_unit_left_to_the_file_but_the_file_has_none(tmp_path: Path) -> None:
    text = "t,fuel,air,co2,o2\n0,1,100,10,5\n1,1,100,10,5\n2,1,100,10,5\n"
    run = tmp_path / "nounits.csv"
    run.write_text(text, encoding="utf-8")
    cfg = tmp_path / "c.toml"
    cfg.write_text(
        '[fuel]\npreset = "diesel_2"\n[channels.time]\ncolumn = "t"\n'
        '[channels.fuel_mass_flow]\ncolumn = "fuel"\n'
        '[channels.air_mass_flow]\ncolumn = "air"\nunit = "kg/h"\nbasis = "wet"\n'
        '[channels.co2]\ncolumn = "co2"\nunit = "%"\nbasis = "dry"\n'
        '[channels.o2]\ncolumn = "o2"\nunit = "%"\nbasis = "dry"\n', encoding="utf-8")
    load_config(cfg)  # a missing unit is allowed at load: the file may give it
    res = CliRunner().invoke(main, ["process", str(run), "--config", str(cfg), "--out",
                                    str(tmp_path / "o"), "--no-plots"])
    assert res.exit_code == 2, res.output
    assert "[channels.fuel_mass_flow] gives no unit" in res.stderr
    assert "column 'fuel'" in res.stderr and str(cfg) in res.stderr


# --- the machine and the user's files, not dynoqc: documented codes, no "internal error" ----
def _cli(args: list[str]) -> object:
    return CliRunner().invoke(main, args)


def test_environment_and_file_problems_have_their_exit_codes(tmp_path: Path) -> None:
    import os

    cfg = ROOT / "configs" / "cell_b3.toml"
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    cases = [
        (["process", str(fifo), "--config", str(cfg), "--out", str(tmp_path / "o")], 3,
         "not a regular file"),
        (["process", str(tmp_path / "nope.csv"), "--config", str(cfg), "--out",
          str(tmp_path / "o")], 2, "no such file"),
        (["process", str(SAMPLE), "--config", str(tmp_path), "--out", str(tmp_path / "o")],
         2, "is a folder"),
    ]
    (tmp_path / "text.h5").write_text("not hdf5")
    cases += [
        (["report", str(tmp_path / "missing.h5")], 3, "no such result file"),
        (["report", str(tmp_path / "text.h5")], 3, "not a readable HDF5 file"),
    ]
    for args, code, phrase in cases:
        r = _cli(args)
        assert r.exit_code == code, (args, r.output)
        assert phrase in r.output and "internal error" not in r.output, r.output


def test_a_fuel_with_no_atoms_is_a_config_error(tmp_path: Path) -> None:
    bad = tmp_path / "c.toml"
    bad.write_text(CONFIG.replace('preset = "diesel_2"', "h_c = 0\nc = 0"))
    assert "h_c = 0" in bad.read_text()
    r = _cli(["process", str(SAMPLE), "--config", str(bad), "--out", str(tmp_path / "o")])
    assert r.exit_code == 2 and "nothing burns" in r.output and str(bad) in r.output


def test_a_closed_pipe_is_not_an_internal_error() -> None:
    # `dynoqc fuels | head -1`: the reader went away; quiet, exit 2, no traceback.
    import subprocess
    import sys

    cmd = (f"{sys.executable} -c 'from pipeline.cli import entry; entry()' fuels "
           "| head -1 >/dev/null; echo ${PIPESTATUS[0]}")
    out = subprocess.run(["bash", "-c", cmd], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "2" and "Traceback" not in out.stderr


def test_quiet_and_json_output(tmp_path: Path) -> None:
    import json

    out = tmp_path / "o"
    r = _cli(["process", str(SAMPLE), "--config", str(ROOT / "configs" / "cell_b3.toml"),
              "--out", str(out), "--no-plots", "--json"])
    assert r.exit_code == 0
    night = json.loads(r.output.strip().splitlines()[-1])
    assert night["status"] == "processed" and night["verdicts"]["co2"].startswith("drift")
    r = _cli(["process", str(SAMPLE), "--config", str(ROOT / "configs" / "cell_b3.toml"),
              "--out", str(out), "--no-plots", "--quiet"])
    assert r.exit_code == 0 and r.output.strip() == ""
    fuels = json.loads(_cli(["fuels", "--json"]).output)
    assert "diesel_2" in fuels
