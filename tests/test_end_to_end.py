"""End to end: the CLI on the bundled sample night, then the result file reopened and checked
against the DESIGN.md result-file contract; and the hidden-night style accuracy check on a
clean simulated night (truth from the forward model)."""

import dataclasses
import hashlib
import subprocess
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest
from click.testing import CliRunner
from conftest import ROOT

import pipeline
from pipeline.cli import main

SAMPLE = ROOT / "sample_runs" / "cell_b3_2026-03-14.csv.gz"
CONFIG = ROOT / "configs" / "cell_b3.toml"
FLAG_CHECKS = {"lambda_disagreement", "drift", "data_gap", "analyzer_not_sampling",
               "out_of_range", "condensation_risk", "time_irregular", "method_invalid"}


@pytest.fixture(scope="module")
def sample_result(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("out")
    before = hashlib.sha256(SAMPLE.read_bytes()).hexdigest()
    res = CliRunner().invoke(main, ["process", str(SAMPLE), "--config", str(CONFIG),
                                    "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert hashlib.sha256(SAMPLE.read_bytes()).hexdigest() == before  # input untouched
    assert "co2" in res.output and "drift" in res.output
    return out / "cell_b3_2026-03-14.h5"


def test_result_file_contract(sample_result):
    with h5py.File(sample_result, "r") as f:
        for key in ("tool_version", "created_utc", "source_file", "source_sha256",
                    "config_toml", "fuel"):
            assert key in f.attrs, key
        assert f.attrs["source_sha256"] == hashlib.sha256(SAMPLE.read_bytes()).hexdigest()
        ts = f["timeseries"]
        n = ts["time"].shape[0]
        assert ts["time"].attrs["units"].startswith("seconds since 2026-03-14T21:00:00")
        for name in ("lambda_flow", "lambda_carbon", "lambda_oxygen", "lambda_sensor",
                     "exhaust_water_fraction", "co2", "o2", "steady", "valid"):
            assert name in ts, name
        for name, ds in ts.items():
            assert ds.shape == (n,), name
            assert "units" in ds.attrs and "long_name" in ds.attrs, name
            assert ds.dtype.kind == "f"
            assert not np.isinf(ds[()]).any(), name
            if name != "time":
                assert ds.compression == "gzip" and ds.shuffle, name
                assert ds.dims[0][0] == ts["time"], name  # dimension scale attached
        flags = f["flags"]
        cols = ("start_s", "end_s", "check", "suspect", "severity", "value", "message")
        assert set(cols) <= set(flags)
        assert len({flags[c].shape for c in cols}) == 1
        checks = {c.decode() if isinstance(c, bytes) else c for c in flags["check"][()]}
        assert checks <= FLAG_CHECKS
        assert "analyzer_delay_s" in f["alignment"].attrs
        assert "steady_points" in f


def test_sample_night_verdict_and_reader(sample_result):
    res = pipeline.read_result(sample_result)
    flags = res.flags
    drift = flags[flags["check"] == "drift"]
    # The sample night's injected fault (sample_runs/README.md): CO2 span drift from
    # 03:10 UTC (22200 s after the start).
    assert len(drift) >= 1 and set(drift["suspect"]) == {"co2"}
    assert 22200 - 600 <= drift["start_s"].min() <= 22200 + 3600
    assert not ((flags["check"] == "drift") & (flags["start_s"] < 21600)).any()
    assert {"analyzer_not_sampling", "data_gap"} <= set(flags["check"])
    assert res.units["lambda_flow"] == "1" and res.units["co2"] == "mol/mol"
    assert list(sample_result.parent.glob("*.png"))


def test_clean_simulated_night_accuracy(tmp_path):
    # Forward model night without faults: median error on steady samples within the targets
    # (lambda_flow 0.5 %, lambda_carbon and lambda_oxygen 1 %; emission rates 2-5 %).
    from pipeline import constants as C
    from pipeline.testing.cell_b3 import METADATA, cell_b3_scenario
    from pipeline.testing.simulate import make_night, write_csv

    sc = dataclasses.replace(cell_b3_scenario(), faults=[], duration_h=4.0, seed=7,
                             cal_windows=[], dropouts=[])
    log, truth = make_night(sc)
    path = write_csv(log, tmp_path / "clean.csv.gz", units=log.attrs["units"], metadata=METADATA)
    r = pipeline.process_run(path, CONFIG)
    s = r.series
    steady = s["steady"].to_numpy() > 0
    assert steady.mean() > 0.5
    lam = truth["lambda"].to_numpy()
    for name, tol in (("lambda_flow", 0.005), ("lambda_carbon", 0.01), ("lambda_oxygen", 0.01)):
        err = np.nanmedian(np.abs(s[name].to_numpy()[steady] / lam[steady] - 1))
        assert err < tol, (name, err)
    n_exh = truth["exhaust_molar_flow"].to_numpy() * 3600
    exact = {
        "co2_mass_flow": (C.M_CO2 * truth["co2_wet"] * n_exh, 0.02),
        "co_mass_flow": (C.M_CO * truth["co_wet"] * n_exh, 0.03),
        "nox_mass_flow": (C.M_NO2 * (truth["no_wet"] + truth["no2_wet"]) * n_exh, 0.03),
        "thc_mass_flow": ((C.M_C + 1.8 * C.M_H) * truth["thc_wet"] * n_exh, 0.05),
    }
    for name, (true, tol) in exact.items():
        err = np.nanmedian(np.abs(s[name].to_numpy()[steady] / true.to_numpy()[steady] - 1))
        assert err < tol, (name, err)
    assert not (r.flags["check"].isin(["drift", "lambda_disagreement"])).any()


def test_console_script_version_and_help_are_light():
    out = subprocess.run([sys.executable, "-m", "pipeline.cli", "--version"], capture_output=True,
                         text=True, check=True)
    assert pipeline.__version__ in out.stdout
    probe = ("import sys, pipeline.cli; heavy = [m for m in ('pandas', 'matplotlib', 'h5py', "
             "'scipy') if m in sys.modules]; print(heavy)")
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_results_do_not_depend_on_the_input_units(tmp_path):
    # Invariance: the same night logged with fuel in g/s, air in kg/s, CO2 in ppm and
    # pressure in mbar (exact unit definitions: 1 kg/h = 1/3.6 g/s, 1 % = 10^4 ppm,
    # 1 kPa = 10 mbar) gives the same lambdas and flags.
    import tomllib

    import pandas as pd

    from pipeline.config import parse_config
    from pipeline.testing.cell_b3 import METADATA, cell_b3_scenario
    from pipeline.testing.simulate import make_night, write_csv

    sc = dataclasses.replace(cell_b3_scenario(), duration_h=3.0, cal_windows=[], dropouts=[])
    log, _ = make_night(sc)
    a = write_csv(log, tmp_path / "a.csv", units=log.attrs["units"], metadata=METADATA)
    units = dict(log.attrs["units"])
    other = log.copy()
    other["fuel_flow"] = log["fuel_flow"] / 3.6
    other["air_flow"] = log["air_flow"] / 3600.0
    other["co2_dry"] = log["co2_dry"] * 1e4
    other["baro"] = log["baro"] * 10.0
    units.update(fuel_flow="g/s", air_flow="kg/s", co2_dry="ppm", baro="mbar")
    b = write_csv(other, tmp_path / "b.csv", units=units, metadata=METADATA)
    raw = tomllib.loads(CONFIG.read_text())
    cfg_a = parse_config(raw, CONFIG)
    raw["channels"]["fuel_mass_flow"]["unit"] = "g/s"
    raw["channels"]["air_mass_flow"]["unit"] = "kg/s"
    raw["channels"]["co2"]["unit"] = "ppm"
    raw["channels"]["ambient_pressure"]["unit"] = "mbar"
    cfg_b = parse_config(raw, CONFIG)
    ra, rb = pipeline.process_run(a, cfg_a), pipeline.process_run(b, cfg_b)
    # The logger file is written with a fixed number of decimals per unit, so the two files
    # differ by that rounding (about 1e-5 relative), not by more.
    for name in ("lambda_flow", "lambda_carbon", "lambda_oxygen", "co2_mass_flow"):
        np.testing.assert_allclose(rb.series[name], ra.series[name], rtol=1e-4, equal_nan=True)
    pd.testing.assert_frame_equal(ra.flags, rb.flags)


def test_no_plots_writes_no_figure_and_never_imports_matplotlib(tmp_path):
    probe = (
        "import sys; from pipeline.api import process_to_files; "
        f"o = process_to_files({str(SAMPLE)!r}, {str(CONFIG)!r}, {str(tmp_path)!r}, plots=False); "
        "print(sorted(p.suffix for p in o.figures), 'matplotlib' in sys.modules, "
        "'scipy' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                         check=True)
    # the steady-point tables are written without figures too (no matplotlib needed); the
    # Excel workbook when XlsxWriter is installed (the test extra has it)
    assert out.stdout.strip() == "['.csv', '.json', '.md', '.xlsx'] False False"
    assert sorted(p.suffix for p in tmp_path.iterdir()) == [".csv", ".h5", ".json", ".md",
                                                            ".xlsx"]


def test_allocator_settings_are_accepted_by_glibc():
    # mallopt(3) returns 1 when glibc accepts a value (its manual page); 32 MiB is the largest
    # mmap threshold glibc allows on 64-bit systems, so a wrong constant would return 0 here.
    import platform

    if not (sys.platform.startswith("linux") and platform.libc_ver()[0] == "glibc"):
        pytest.skip("glibc only")
    probe = "from pipeline.runtime import tune_allocator; print(tune_allocator())"
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                         check=True)
    assert out.stdout.strip() == "True"  # in a fresh process: this one stays as it is


def test_the_api_under_its_own_name():
    # `import dynoqc` (a user's own pipeline.py cannot shadow it) gives the public names.
    import dynoqc
    import pipeline

    assert dynoqc.process_run is pipeline.process_run
    assert {"process_run", "read_result", "plot_lambda_overview"} <= set(dir(dynoqc))
