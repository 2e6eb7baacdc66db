"""Property-based fuzz of the promises on bad input (hypothesis).

Whatever the bytes of a log or the text of a config, ``dynoqc process`` ends with an exit
code in {0, 2, 3}, prints no traceback, leaves no partial or temporary file and never
changes its input; when it processes, every row is accounted for (read = kept + dropped).
The cases are mutations of a small clean night: cells, rows and lines replaced, cut or
duplicated, and config values replaced by other TOML values.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import h5py
import pytest
from click.testing import CliRunner
from conftest import ROOT, SAMPLE_CONFIG
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pipeline.cli import main

pytestmark = pytest.mark.filterwarnings("ignore")

_LINES = None


def _night_lines() -> list[str]:
    """A 10 min slice of the bundled night, as text lines (header block included)."""
    global _LINES
    if _LINES is None:
        import gzip

        text = gzip.open(ROOT / "sample_runs" / "cell_b3_2026-03-14.csv.gz", "rt").read()
        lines = text.splitlines()
        first = next(i for i, ln in enumerate(lines) if not ln.startswith("#"))
        _LINES = lines[: first + 2 + 600]
    return list(_LINES)


JUNK = st.sampled_from(["", "nan", "-9999", "1e400", "x", "1,5", "\x00", "  ", "inf", "--",
                        "2026-13-45", "9" * 400, "é", ";", ",,,", "0x1F"])


@st.composite
def mutated_log(draw) -> str:
    lines = _night_lines()
    n_head = next(i for i, ln in enumerate(lines) if not ln.startswith("#")) + 2
    for _ in range(draw(st.integers(1, 6))):
        kind = draw(st.sampled_from(["cell", "row", "cut", "dup", "header", "swap"]))
        i = draw(st.integers(0, len(lines) - 1))
        if kind == "cell" and i >= n_head:
            cells = lines[i].split(",")
            cells[draw(st.integers(0, len(cells) - 1))] = draw(JUNK)
            lines[i] = ",".join(cells)
        elif kind == "row":
            lines[i] = draw(JUNK)
        elif kind == "cut":
            lines = lines[: max(1, i)]
        elif kind == "dup":
            lines.insert(i, lines[i])
        elif kind == "header" and i < n_head:
            lines[i] = draw(JUNK)
        elif kind == "swap" and i + 1 < len(lines):
            lines[i], lines[i + 1] = lines[i + 1], lines[i]
    return "\n".join(lines) + "\n"


def _promises(tmp: Path, log_bytes: bytes, config_text: str) -> None:
    run = tmp / "night.csv"
    run.write_bytes(log_bytes)
    cfg = tmp / "cell.toml"
    cfg.write_text(config_text, encoding="utf-8")
    before = hashlib.sha256(log_bytes).hexdigest()
    out = tmp / "out"
    r = CliRunner().invoke(main, ["process", str(run), "--config", str(cfg), "--out", str(out),
                                  "--no-plots"])
    assert r.exit_code in (0, 2, 3), r.output
    assert "Traceback" not in r.output and "internal error" not in r.output, r.output
    assert hashlib.sha256(run.read_bytes()).hexdigest() == before
    assert not list(out.glob(".*.tmp")) if out.exists() else True
    result = out / "night.h5"
    if r.exit_code == 0:
        with h5py.File(result) as f:
            rows = f["timeseries/time"].shape[0]
            read, dropped = int(f.attrs["rows_read"]), int(f.attrs["rows_dropped"])
        assert rows == read - dropped
        json.loads((out / "night_summary.json").read_text())
    else:
        assert not result.exists()


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                  HealthCheck.function_scoped_fixture])
@given(mutated_log())
def test_a_damaged_log_keeps_the_promises(tmp_path_factory, text: str) -> None:
    _promises(tmp_path_factory.mktemp("fuzz"), text.encode("utf-8", "surrogatepass"),
              SAMPLE_CONFIG.read_text())


TOML_VALUES = st.sampled_from(["nan", "inf", "-inf", "-1", "0", "1e9", '"abc"', "true",
                               "[]", "{}", '"co2_dry"', "-273.15", "1e-12"])


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                  HealthCheck.function_scoped_fixture])
@given(st.data())
def test_a_damaged_config_keeps_the_promises(tmp_path_factory, data) -> None:
    lines = SAMPLE_CONFIG.read_text().splitlines()
    keyed = [i for i, ln in enumerate(lines) if "=" in ln and not ln.lstrip().startswith("#")]
    for _ in range(data.draw(st.integers(1, 3))):
        i = data.draw(st.sampled_from(keyed))
        key = lines[i].split("=")[0]
        lines[i] = f"{key}= {data.draw(TOML_VALUES)}"
    log = ("\n".join(_night_lines()) + "\n").encode()
    _promises(tmp_path_factory.mktemp("cfg"), log, "\n".join(lines) + "\n")
