"""Broken and odd logged files through ``dynoqc process``, as a user runs it.

Each case starts from a simulated night of our invented Cell B3 (forward model, 1 h at 1 Hz)
and its config, corrupts the file, and checks the contract of the issue: unrecoverable files
end with the documented exit code, a short message naming the file/column and no result (nor
temporary) file; recoverable ones are processed with what was wrong counted in the result
file, NaN never inf, and rows in = rows out + rows dropped. The input is never modified.
"""

from __future__ import annotations

import dataclasses
import gzip
import hashlib
import re
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from click.testing import CliRunner
from conftest import ROOT

from pipeline.cli import main
from pipeline.result import read_result
from pipeline.testing.simulate import make_night, write_csv

CONFIG_TEXT = (ROOT / "configs" / "cell_b3.toml").read_text(encoding="utf-8")
CONFIG_NO_INPUT = re.sub(r"\[input\][^\[]*", "", CONFIG_TEXT)
DYNOQC = Path(sys.executable).with_name("dynoqc")
N_HEADER = 8  # 6 metadata lines, names, units (write_csv with the sample's metadata)
COLUMNS = ["time", "engine_speed", "engine_torque", "fuel_flow", "air_flow", "co2_dry",
           "co_dry", "o2_dry", "nox_dry", "thc_hot", "lambda_wb", "cell_air_temp", "baro",
           "cell_air_rh", "bench_mode", "line_temp"]


@pytest.fixture(scope="module")
def night(tmp_path_factory: pytest.TempPathFactory) -> str:
    """The text of a clean 1 h night (with one 20 s logger dropout), as the cell logs it."""
    from pipeline.testing.cell_b3 import METADATA, cell_b3_scenario

    sc = dataclasses.replace(cell_b3_scenario(), duration_h=1.0, dropouts=[(0.5, 20.0)],
                             faults=[], cal_windows=[])
    logged, _ = make_night(sc)
    path = tmp_path_factory.mktemp("night") / "night.csv"
    write_csv(logged, path, units=logged.attrs["units"], metadata=METADATA)
    text = path.read_text(encoding="utf-8")
    assert text.splitlines()[N_HEADER - 2].split(",") == COLUMNS
    return text


def edit_rows(text: str, fn: Callable[[list[list[str]]], list[list[str]]]) -> str:
    """Apply ``fn`` to the data rows (as lists of cells) of a night's text."""
    lines = text.splitlines()
    rows = [ln.split(",") for ln in lines[N_HEADER:]]
    return "\n".join(lines[:N_HEADER] + [",".join(r) for r in fn(rows)]) + "\n"


def set_cells(col: int, value: str, rows_idx: range | list[int]) -> Callable:
    def fn(rows: list[list[str]]) -> list[list[str]]:
        for i in rows_idx:
            rows[i][col] = value
        return rows
    return fn


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def run_cli(tmp_path: Path, data: bytes | str, name: str = "night.csv",
            config: str = CONFIG_TEXT, extra: tuple[str, ...] = ()) -> tuple[Any, Path, Path]:
    run = tmp_path / name
    run.write_bytes(data.encode("utf-8") if isinstance(data, str) else data)
    cfg = tmp_path / "cell.toml"
    cfg.write_text(config, encoding="utf-8")
    out = tmp_path / "out"
    before = sha(run)
    res = CliRunner().invoke(
        main, ["process", str(run), "--config", str(cfg), "--out", str(out), "--no-plots",
               *extra],
    )
    assert sha(run) == before, "the input file was modified"
    assert "Traceback" not in res.output
    if out.exists():
        assert not [p for p in out.iterdir() if p.name.endswith(".tmp")], "temporary file left"
    return res, run, out


# -- unrecoverable input: exit 3, a message naming file and column, no result file ----------

def _swap_delim(text: str) -> str:
    semi = text.replace(",", ";")
    return re.sub(r"(\d)\.(\d)", r"\1,\2", semi)


UNRECOVERABLE: list[tuple[str, Callable[[str], bytes | str], str, list[str]]] = [
    ("empty", lambda t: b"", CONFIG_TEXT, ["the file is empty"]),
    ("header only", lambda t: "\n".join(t.splitlines()[:N_HEADER]) + "\n", CONFIG_TEXT,
     ["no data rows"]),
    ("binary junk", lambda t: np.random.default_rng(3).bytes(5000), CONFIG_TEXT,
     ["not a text file"]),
    ("mapped column missing", lambda t: t.replace("co2_dry,", "co2dry_x,", 1), CONFIG_TEXT,
     ["column 'co2_dry'", "[channels.co2]", "Close matches"]),
    ("decimal comma read with '.'", _swap_delim,
     CONFIG_TEXT.replace('delimiter = ","', 'delimiter = ";"'),
     ["column 'fuel_flow'", "holds no numbers", "decimal '.'"]),
    ("fuel flow column empty", lambda t: edit_rows(t, set_cells(3, "", range(3601))),
     CONFIG_TEXT, ["column 'fuel_flow'", "[channels.fuel_mass_flow]", "only empty cells"]),
    ("time column not numbers", lambda t: edit_rows(t, set_cells(0, "n/a?", range(3601))),
     CONFIG_TEXT, ["column 'time'", "[channels.time]", "'n/a?'"]),
    ("truncated gzip", lambda t: gzip.compress(t.encode())[: len(gzip.compress(t.encode())) // 2],
     CONFIG_TEXT, ["cannot"]),
]


@pytest.mark.parametrize("label,make,config,phrases", UNRECOVERABLE,
                         ids=[c[0] for c in UNRECOVERABLE])
def test_unrecoverable_input_exit_3_no_result(
    night: str, tmp_path: Path, label: str, make: Callable, config: str, phrases: list[str]
) -> None:
    name = "night.csv.gz" if label == "truncated gzip" else "night.csv"
    res, run, out = run_cli(tmp_path, make(night), name=name, config=config)
    assert res.exit_code == 3, res.output
    msg = res.stderr.strip()
    assert msg.startswith("dynoqc: ") and str(run) in msg
    for p in phrases:
        assert p in msg, msg
    assert msg.count(". ") <= 3 and len(msg.splitlines()) == 1  # one or two plain sentences
    assert not (out / "night.h5").exists()


def test_wrong_format_name_and_debug_traceback(night: str, tmp_path: Path) -> None:
    res, run, out = run_cli(tmp_path, night, name="night.parquet")
    assert res.exit_code == 3 and "the name says a Parquet file" in res.stderr
    # --debug shows the traceback, the exit code stays the same
    cfg = tmp_path / "cell.toml"
    res = CliRunner().invoke(main, ["process", str(run), "--config", str(cfg), "--out",
                                    str(out), "--no-plots", "--debug"])
    assert res.exit_code == 3


# -- recoverable input: processed, what was wrong counted in the result file -----------------

def _result(out: Path) -> tuple[Any, np.ndarray]:
    r = read_result(out / "night.h5")
    num = r.timeseries.select_dtypes("number").to_numpy()
    assert not np.isinf(num).any(), "inf in the result file"
    assert r.attrs["rows_read"] - r.attrs["rows_dropped"] == len(r.timeseries)
    return r, num


def test_non_numeric_cells_counted(night: str, tmp_path: Path) -> None:
    text = edit_rows(night, set_cells(5, "ERR", [100, 200, 300]))
    text = edit_rows(text, set_cells(1, "#VALUE!", [50, 60]))
    res, _, out = run_cli(tmp_path, text)
    assert res.exit_code == 0, res.output
    r, _ = _result(out)
    assert r.attrs["bad_cells"] == {"co2": 3, "speed": 2}
    assert any("'co2_dry' (co2): 3 non-numeric" in w for w in r.attrs["warnings"])
    assert "3 non-numeric cell(s)" in res.stdout  # the console summary says it too
    assert np.isnan(r.timeseries["speed"].to_numpy()[[50, 60]]).all()


def test_truncated_last_line(night: str, tmp_path: Path) -> None:
    text = night.rstrip("\n")
    res, _, out = run_cli(tmp_path, text[: text.rfind(",", 0, len(text) - 30)])
    assert res.exit_code == 0, res.output
    r, _ = _result(out)
    assert r.attrs["rows_read"] == 3601 and r.attrs["rows_dropped"] == 0
    assert np.isnan(r.timeseries["ambient_humidity"].iloc[-1])


def test_absurd_and_negative_values(night: str, tmp_path: Path) -> None:
    text = edit_rows(night, set_cells(3, "-9999", range(1000, 1010)))
    text = edit_rows(text, set_cells(5, "1e30", range(2000, 2005)))
    text = edit_rows(text, set_cells(4, "-40", range(1500, 1530)))
    res, _, out = run_cli(tmp_path, text)
    assert res.exit_code == 0, res.output
    r, _ = _result(out)
    assert r.attrs["bad_cells"] == {"fuel_mass_flow": 10, "co2": 5}
    assert np.isnan(r.timeseries["fuel_mass_flow"].to_numpy()[1000:1010]).all()
    assert any("30 negative reading(s)" in w and "air_flow" in w for w in r.attrs["warnings"])
    assert np.isfinite(r.timeseries["lambda_flow"].to_numpy()[:900]).any()


def test_fuel_cut_to_zero_gives_nan_lambda_not_inf(night: str, tmp_path: Path) -> None:
    res, _, out = run_cli(tmp_path, edit_rows(night, set_cells(3, "0", range(1200, 1500))))
    assert res.exit_code == 0, res.output
    r, _ = _result(out)
    lam = r.timeseries["lambda_flow"].to_numpy()
    assert np.isnan(lam[1200:1500]).all() and np.isfinite(lam[:1100]).any()
    assert any("reads zero or less on 300 row(s)" in w for w in r.attrs["warnings"])


@pytest.mark.parametrize("col,name", [(8, "nox"), (5, "co2")])
def test_analyzer_channel_entirely_empty(night: str, tmp_path: Path, col: int, name: str) -> None:
    res, _, out = run_cli(tmp_path, edit_rows(night, set_cells(col, "", range(3601))))
    assert res.exit_code == 0, res.output
    r, _ = _result(out)
    assert np.isnan(r.timeseries[name]).all()
    assert any(f"({name}) holds no numbers" in w for w in r.attrs["warnings"])


def test_dropout_rows_kept_and_reported(night: str, tmp_path: Path) -> None:
    def blank(rows: list[list[str]]) -> list[list[str]]:
        for i in range(2000, 2100):
            rows[i] = [rows[i][0]] + [""] * 14
        return rows
    res, _, out = run_cli(tmp_path, edit_rows(night, blank))
    assert res.exit_code == 0, res.output
    r, _ = _result(out)
    assert r.attrs["rows_dropped"] == 0 and len(r.timeseries) == 3601
    assert (r.flags["check"] == "data_gap").any()


def test_restart_duplicates_and_swap_policy(night: str, tmp_path: Path) -> None:
    def mangle(rows: list[list[str]]) -> list[list[str]]:
        out = []
        for i, r in enumerate(rows):
            if i >= 3000:
                r = [str(i - 3000)] + r[1:]  # logger restart: time from 0 again
            out.append(r)
            if 500 <= i < 510:
                out.append(list(r))  # duplicated time stamps
        out[1000], out[1001] = out[1001], out[1000]  # two rows written out of order
        return out
    res, _, out = run_cli(tmp_path, edit_rows(night, mangle))
    assert res.exit_code == 0, res.output
    r, _ = _result(out)
    assert r.attrs["rows_read"] == 3611 and r.attrs["rows_dropped"] == 11
    t = r.timeseries["time"].to_numpy()
    assert np.all(np.diff(t) > 0)
    w = " ".join(r.attrs["warnings"])
    assert "10 row(s) repeating" in w and "1 row(s) written out of order" in w
    assert "backwards 1 time(s)" in w


@pytest.mark.parametrize("variant", ["latin1", "bom", "semicolon_comma", "tsv_gz", "crlf"])
def test_encodings_and_layouts(night: str, tmp_path: Path, variant: str) -> None:
    config = CONFIG_NO_INPUT
    name = "night.csv"
    if variant == "latin1":
        data: bytes = night.replace("cell_air_temp", "T_Zelle °C").replace(
            ",degC,", ",°C,").encode("latin-1")
        config = config.replace('column = "cell_air_temp"\nunit = "degC"',
                                'column = "T_Zelle °C"\nunit = "°C"')
    elif variant == "bom":
        data = b"\xef\xbb\xbf" + night.encode()
    elif variant == "semicolon_comma":
        data = _swap_delim(night).encode()
    elif variant == "tsv_gz":
        data, name = gzip.compress(night.replace(",", "\t").encode()), "night.tsv.gz"
    else:
        data = night.replace("\n", "\r\n").encode()
    res, _, out = run_cli(tmp_path, data, name=name, config=config)
    assert res.exit_code == 0, res.output
    r, _ = _result(out)
    assert r.attrs["rows_read"] == 3601 and r.attrs["bad_cells"] == {}
    assert r.attrs["start_time_utc"] == "2026-03-14T21:00:00Z"
    assert r.start_time is not None
    assert np.nanmax(r.timeseries["ambient_temperature"]) < 30.0


# -- real subprocess runs of the installed command -------------------------------------------

def _subprocess(args: list[str]) -> subprocess.CompletedProcess[str]:
    return subprocess.run([str(DYNOQC), *args], capture_output=True, text=True, timeout=300)


@pytest.mark.skipif(not DYNOQC.exists(), reason="dynoqc entry point not installed")
def test_subprocess_bad_and_good(night: str, tmp_path: Path) -> None:
    cfg = tmp_path / "cell.toml"
    cfg.write_text(CONFIG_TEXT, encoding="utf-8")
    bad = tmp_path / "bad.csv"
    bad.write_text(night.replace(",o2_dry,", ",o2-dry,", 1), encoding="utf-8")
    p = _subprocess(["process", str(bad), "--config", str(cfg), "--out", str(tmp_path / "o")])
    assert p.returncode == 3 and "Traceback" not in p.stderr
    assert "column 'o2_dry'" in p.stderr and "'o2-dry'" in p.stderr
    assert not (tmp_path / "o" / "bad.h5").exists()
    good = tmp_path / "good.csv"
    good.write_text(edit_rows(night, set_cells(7, "junk", [10])), encoding="utf-8")
    p = _subprocess(["process", str(good), "--config", str(cfg), "--out", str(tmp_path / "o"),
                     "--no-plots"])
    assert p.returncode == 0, p.stderr
    assert read_result(tmp_path / "o" / "good.h5").attrs["bad_cells"] == {"o2": 1}


@pytest.mark.skipif(not DYNOQC.exists(), reason="dynoqc entry point not installed")
def test_sigint_leaves_no_partial_result_and_keeps_older_one(
    night: str, tmp_path: Path
) -> None:
    """Ctrl-C while processing a 12 h night at 10 Hz: exit 130, no temporary file, the older
    result at the final name untouched, the input untouched."""
    lines = night.splitlines()
    header, rows = lines[:N_HEADER], lines[N_HEADER + 1:]  # (skip t = 0)
    # 432 000 rows: the hour of data repeated 120 times, time on a 0.1 s raster.
    body = "\n".join(
        f"{k * 0.1:.1f}," + rows[k % len(rows)].split(",", 1)[1] for k in range(432_000)
    )
    run = tmp_path / "big.csv"
    run.write_text("\n".join(header) + "\n" + body + "\n", encoding="utf-8")
    cfg = tmp_path / "cell.toml"
    cfg.write_text(CONFIG_TEXT, encoding="utf-8")
    out = tmp_path / "out"
    out.mkdir()
    final = out / "big.h5"
    final.write_bytes(b"an older result")
    before_in, before_out = sha(run), sha(final)
    for wait in ("tmp", 0.8):
        p = subprocess.Popen(
            [str(DYNOQC), "process", str(run), "--config", str(cfg), "--out", str(out),
             "--no-plots", "--force"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )
        t0 = time.monotonic()
        if wait == "tmp":  # interrupt while the result is being written
            while p.poll() is None and time.monotonic() - t0 < 120:
                if any(f.name.endswith(".tmp") for f in out.iterdir()):
                    break
                time.sleep(0.005)
        else:  # interrupt while reading / computing
            time.sleep(float(wait))
        assert p.poll() is None, "finished before it could be interrupted"
        p.send_signal(signal.SIGINT)
        _, err = p.communicate(timeout=120)
        assert p.returncode == 130, err
        assert "interrupted" in err and "Traceback" not in err
        assert sorted(f.name for f in out.iterdir()) == ["big.h5"]
        assert sha(final) == before_out and sha(run) == before_in
