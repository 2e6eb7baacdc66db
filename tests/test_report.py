"""Report stage: the numbers behind each figure, the verdicts, skipping, and the full render."""

from __future__ import annotations

import json
import re
import zlib
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pandas as pd
import pytest

from pipeline.records import ProcessResult, make_flags
from pipeline.report import reportdata as rd
from pipeline.report.consistency import consistency_data
from pipeline.report.emissions import emission_data
from pipeline.report.fuel import fuel_data
from pipeline.report.hdf5 import write_result
from pipeline.report.plots import FigureSkipped
from pipeline.report.render import render_report
from pipeline.report.residuals import drift_row
from pipeline.report.steady_table import table_data
from pipeline.report.summary import build_summary, markdown, write_pdf
from pipeline.report.water import water_data
from pipeline.result import read_result

START = "2026-03-14T21:00:00Z"
#: Steady windows of the synthetic night [s]: four points of 50 min, 10 min ramps between.
WINDOWS = [(600.0, 3600.0), (4200.0, 7200.0), (7800.0, 10800.0), (11400.0, 14000.0)]
DRIFT_ONSET = 7000.0


def _result(
    tmp_path: Path,
    *,
    rate_hz: float = 1.0,
    hours: float = 4.0,
    drop: tuple[str, ...] = (),
    flags: list[dict] | None = None,
    name: str = "night.h5",
) -> Path:
    """A synthetic processed night: lambda 1.5 with a +4 % ramp on lambda_carbon from
    DRIFT_ONSET (a CO2 analyzer reading low), four steady points, a not-sampling window."""
    rng = np.random.default_rng(7)
    t = np.arange(0.0, hours * 3600.0, 1.0 / rate_hz)
    n = t.size
    steady = np.zeros(n)
    for a, b in WINDOWS:
        steady[(t >= a) & (t <= b)] = 1.0
    sampling = np.where((t >= 5000) & (t < 5600), 0.0, 1.0)
    lam = 1.5 + 0.3 * np.floor(t / 3600.0)
    ramp = np.clip((t - DRIFT_ONSET) / 3600.0, 0.0, 1.0) * 0.04
    lf = lam * (1 + rng.normal(0, 0.002, n))
    lc = lam * (1 + ramp) * (1 + rng.normal(0, 0.001, n))
    lo = lam * (1 + rng.normal(0, 0.001, n))
    lc[sampling == 0] = np.nan
    lo[sampling == 0] = np.nan
    fuel = np.full(n, 10.0)
    data = {
        "time": t,
        "speed": np.full(n, 2000.0),
        "torque": np.full(n, 200.0),
        "brake_power": np.full(n, 2 * np.pi * 2000 / 60 * 200 / 1000),
        "fuel_mass_flow": fuel,
        "air_dry_mass_flow": lam * 14.5 * fuel,
        "lambda_flow": lf,
        "lambda_carbon": lc,
        "lambda_oxygen": lo,
        "lambda_sensor": lam * (1 + rng.normal(0, 0.003, n)),
        "fuel_mass_flow_carbon": fuel * lf / lc,
        "residual_fuel_flow": lf / lc - 1,
        "residual_carbon_flow": lc / lf - 1,
        "residual_oxygen_flow": lo / lf - 1,
        "residual_oxygen_carbon": lo / lc - 1,
        "steady": steady,
        "valid": np.isfinite(lc).astype(float),
        "sampling": sampling,
        "exhaust_dewpoint": np.full(n, 45.0),
        "sample_line_temperature": np.where(t > 12_000, 40.0, 190.0),
        "co2_mass_flow": np.full(n, 31_000.0) / (1 + ramp),
        "nox_mass_flow": np.full(n, 150.0),
    }
    for col in drop:
        data.pop(col)
    if flags is None:
        flags = [
            {"start_s": 5000, "end_s": 5600, "check": "analyzer_not_sampling",
             "severity": "info", "value": 600},
            {"start_s": DRIFT_ONSET, "end_s": t[-1], "check": "drift", "suspect": "co2",
             "severity": "warning", "value": 4.0,
             "message": "Ramp drift on residual_carbon_flow."},
        ]
    tables = {
        "steady_points": pd.DataFrame(
            {"start_s": [w[0] for w in WINDOWS], "end_s": [w[1] for w in WINDOWS]}
        ),
        "drift": pd.DataFrame(
            {
                "residual": ["residual_carbon_flow", "residual_oxygen_flow"],
                "baseline": [0.0, 0.0],
                "noise_pct": [0.1, 0.1],
                "onset_s": [DRIFT_ONSET, np.nan],
                "end_s": [t[-1], np.nan],
                "size_pct": [4.0, np.nan],
                "rate_pct_per_h": [4.0, np.nan],
                "kind": ["ramp", ""],
                "min_detectable_drift_pct": [1.0, 1.0],
                "detected": [1, 0],
            }
        ),
    }
    attrs = {
        "run_name": "synthetic night",
        "source_file": "night.csv",
        "source_sha256": "ab" * 32,
        "fuel_name": "diesel_2",
        "fuel": {"w_c": 0.8688},
        "config_file": "cell.toml",
        "tool_version": "0.1.0",
        "start_time_utc": START,
        "checks_settings": {"disagreement_tolerance": 0.03, "disagreement_tolerance_sensor": 0.04},
    }
    extra = {"steady": "1", "fuel_mass_flow_carbon": "kg/h", "residual_fuel_flow": "1"}
    extra |= {k: "1" for k in data if k.startswith("residual_")}
    series_attrs = {k: {"units": u, "long_name": k.replace("_", " ")} for k, u in extra.items()}
    res = ProcessResult(series=pd.DataFrame(data), series_attrs=series_attrs,
                        flags=make_flags(flags),
                        attrs=attrs, tables=tables)
    return write_result(tmp_path / name, res)


@pytest.fixture(scope="module")
def night(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return _result(tmp_path_factory.mktemp("night"))


# ---------------------------------------------------------------------------------------
# numbers behind the figures
# ---------------------------------------------------------------------------------------
def test_carbon_balance_error_matches_1065_643_example() -> None:
    # 40 CFR 1065.643 worked example: m_Cexh 1247.2 g, m_Cfluid 975.3 g, m_Cair 278.6 g
    # -> eps_rC = -0.0053. Here as rates over 1 h with w_C = 1 (fuel mass = carbon mass).
    # Dry air 28.96559 g/mol and carbon 12.0107 g/mol: 40 CFR 1065.1005 values.
    from pipeline.balance.emissions import carbon_balance_error_rate

    x_co2 = 375e-6
    air_dry = 278.6 * 28.96559 / (x_co2 * 12.0107)  # dry air [kg/h] carrying 278.6 g C/h
    eps = carbon_balance_error_rate(
        np.array([975.3]), np.array([1247.2 - 278.6]), np.array([air_dry]), 1.0, x_co2
    )
    np.testing.assert_allclose(eps, -0.0053, atol=5e-5)


def test_steady_point_stats_use_only_steady_judged_samples(night: Path) -> None:
    res = read_result(night)
    pts = rd.steady_point_stats(res)
    assert list(pts["point"]) == [1, 2, 3, 4]
    t = res.timeseries["time"].to_numpy()
    lc = res.timeseries["lambda_carbon"].to_numpy()
    a, b = WINDOWS[1]  # contains the not-sampling window 5000-5600 s
    sel = (t >= a) & (t <= b) & (t < 5000) | (t >= 5600) & (t <= b) & (t >= a)
    np.testing.assert_allclose(pts.loc[1, "lambda_carbon"], lc[sel].mean(), rtol=1e-12)
    assert pts.loc[1, "samples"] == sel.sum()
    # a residual mean matches its definition from the lambda means within noise
    np.testing.assert_allclose(pts.loc[0, "residual_carbon_flow"], 0.0, atol=5e-4)
    # drifted last point: lambda_carbon about +4 % and a carbon-balance error of about -3.8 %
    np.testing.assert_allclose(pts.loc[3, "residual_carbon_flow"], 0.04, atol=2e-3)
    np.testing.assert_allclose(pts.loc[3, "carbon_balance_error"], 1 / 1.04 - 1, atol=2e-3)


def test_steady_windows_fall_back_to_the_mask(tmp_path: Path) -> None:
    res = read_result(_result(tmp_path))
    res.tables.pop("steady_points")
    w = rd.steady_windows(res)
    np.testing.assert_allclose(w[["start_s", "end_s"]].to_numpy(), np.array(WINDOWS))


def test_steady_blocks_and_time_blocks(night: Path) -> None:
    res = read_result(night)
    blocks = rd.steady_blocks(res, block_s=600.0)
    assert set(blocks["point"]) == {1, 2, 3, 4}
    assert (blocks["samples"] <= 600).all() and blocks["samples"].sum() == (
        rd.point_index(res) >= 0
    ).sum()
    tb, mean, lo, hi = rd.time_blocks(res, "residual_carbon_flow", 600.0)
    assert np.all(lo <= mean) and np.all(mean <= hi)
    assert tb.size == mean.size and np.all(np.diff(tb) > 0)


def test_point_verdicts_need_a_real_overlap() -> None:
    pts = pd.DataFrame({"start_s": [0.0, 1000.0, 2000.0], "end_s": [900.0, 1900.0, 2900.0],
                        "residual_carbon_flow": [0.0, 0.0, 0.05]})
    flags = make_flags([{"start_s": 880, "end_s": 1500, "check": "drift", "suspect": "o2",
                         "severity": "warning"}])
    v = rd.point_verdicts(pts, flags, 0.03)
    assert v == ["ok", "drift: o2", "beyond \u00b13 %"]  # 20 s touch of point 1 does not count


def test_clock_rounds_to_the_minute(night: Path) -> None:
    res = read_result(night)
    assert rd.clock(res, 17996.0) == "02:00 UTC"
    assert rd.clock(res, 3600.0, with_elapsed=True) == "22:00 UTC (1.0 h into the run)"
    res.start_time = None
    assert rd.clock(res, 5400.0) == "1.5 h into the run"


def test_tolerance_from_checks_settings_or_default(night: Path) -> None:
    res = read_result(night)
    assert rd.tolerance(res)[:2] == (0.03, 0.04)
    res.attrs.pop("checks_settings")
    # Without recorded settings: the checks stage's own defaults, the values it judges with.
    from pipeline.checks.settings import DEFAULTS

    assert rd.tolerance(res)[:2] == (
        DEFAULTS["disagreement_tolerance"], DEFAULTS["disagreement_tolerance_sensor"]
    )


def test_instrument_verdicts_name_the_drifting_co2_analyzer(night: Path) -> None:
    res = read_result(night)
    v = {x.instrument: x for x in rd.instrument_verdicts(res)}
    assert rd.instrument_verdicts(res)[0].instrument == "co2"
    co2 = v["co2"]
    assert co2.status == "suspect"
    # lambda_carbon +4.0 % <=> the analyzer reads 4.0 / 1.04 = 3.85 % low
    assert "reads about 3.8 % low" in co2.evidence
    assert "from 22:57 UTC (1.9 h into the run) to the end of the run" in co2.evidence
    assert "ramp shape, +4.00 %/h on residual_carbon_flow" in co2.evidence
    assert v["o2"].status == "ok" and v["air_mass_flow"].status == "ok"


def test_flow_meter_pair_is_a_shared_suspect(tmp_path: Path) -> None:
    flags = [{"start_s": 3000, "end_s": 6000, "check": "lambda_disagreement",
              "suspect": "air_mass_flow|fuel_mass_flow", "severity": "error", "value": -6.0}]
    res = read_result(_result(tmp_path, flags=flags))
    v = {x.instrument: x for x in rd.instrument_verdicts(res)}
    assert v["air_mass_flow"].status == "shared suspect"
    assert v["fuel_mass_flow"].status == "shared suspect"
    assert "air meter reads low or the fuel meter reads high by about 6.0 %" in (
        v["air_mass_flow"].evidence
    )
    assert v["co2"].status == "ok"
    assert "Shared suspect with the fuel flow meter." in v["air_mass_flow"].evidence
    assert "air_mass_flow|fuel_mass_flow" not in v  # one line per meter, not one for the pair
    assert build_summary(res)["headline"] == (
        "Suspect: air flow meter or fuel flow meter (the data cannot tell which)."
    )


def test_figure_data(night: Path) -> None:
    res = read_result(night)
    blocks, present, tol = consistency_data(res)
    assert present == ["lambda_carbon", "lambda_oxygen"] and tol == 0.03
    np.testing.assert_allclose(
        blocks["dev_lambda_carbon"], 100 * (blocks["lambda_carbon"] / blocks["lambda_flow"] - 1)
    )
    late = blocks["t_s"] > DRIFT_ONSET + 3600
    np.testing.assert_allclose(blocks.loc[late, "dev_lambda_carbon"], 4.0, atol=0.2)
    fb, _ = fuel_data(res)
    np.testing.assert_allclose(fb.loc[late, "fuel_diff_pct"], 100 * (1 / 1.04 - 1), atol=0.2)
    pts, names = emission_data(res)
    assert names == ["co2_mass_flow", "nox_mass_flow"]
    power = 2 * np.pi * 2000 / 60 * 200 / 1000
    np.testing.assert_allclose(pts["bs_nox_mass_flow"], 150.0 / power, rtol=1e-9)
    tab = table_data(res)
    assert list(tab["verdict"]) == ["ok", "ok", "drift: co2", "drift: co2"]
    np.testing.assert_allclose(tab["duration_min"], [50.0, 50.0, 50.0, 2600 / 60])
    d = drift_row(res.tables["drift"], "residual_carbon_flow")
    assert d["detected"] and d["size_pct"] == 4.0 and d["onset_s"] == DRIFT_ONSET
    assert drift_row(res.tables["drift"], "residual_sensor_flow") == {}
    t, dew, margin = water_data(res)
    assert margin.min() == -5.0 and margin.max() == 145.0


@pytest.mark.parametrize(
    ("drop", "fn", "match"),
    [
        (("sample_line_temperature",), water_data, "sample_line_temperature not logged"),
        (("co2_mass_flow", "nox_mass_flow"), emission_data, "no emission rates"),
        (("lambda_flow",), consistency_data, "no lambda_flow"),
        (("fuel_mass_flow_carbon",), fuel_data, "no carbon-balance fuel flow"),
    ],
)
def test_figures_without_their_channels_are_skipped(
    tmp_path: Path, drop: tuple[str, ...], fn, match: str  # noqa: ANN001
) -> None:
    res = read_result(_result(tmp_path, drop=drop))
    with pytest.raises(FigureSkipped, match=match):
        fn(res)


# ---------------------------------------------------------------------------------------
# the whole report
# ---------------------------------------------------------------------------------------
def test_render_report_writes_figures_and_summary(night: Path, tmp_path: Path) -> None:
    out = render_report(night, tmp_path)
    names = sorted(p.name for p in out)
    pngs = [p for p in out if p.suffix == ".png"]
    assert {p.name for p in pngs} == {
        f"night_{k}.png"
        for k in ("lambda", "consistency", "residuals", "steady_points", "water", "fuel",
                  "emissions")
    }
    for p in pngs:
        img = mpimg.imread(p)
        assert img.shape[1] >= 1200
        assert (img[..., :3] < 0.5).any()
    assert {"night_summary.md", "night_summary.pdf", "night_summary.json"} <= set(names)
    s = json.loads((tmp_path / "night_summary.json").read_text())
    assert s["headline"] == "Suspect: CO2 analyzer."
    assert s["verdicts"][0]["status"] == "suspect"
    assert s["skipped_figures"] == {}
    # instrument findings are listed before data availability
    assert len(s["flags"]) == 2 and s["flags"][0]["start"] == "22:57 UTC"
    assert [f["check"] for f in s["flags"]] == ["drift", "analyzer_not_sampling"]
    assert s["flag_counts"] == {"analyzer_not_sampling": 1, "drift": 1}
    md = (tmp_path / "night_summary.md").read_text()
    assert md.index("Verdict per instrument") < md.index("## Flags") < md.index("Key numbers")
    assert (tmp_path / "night_summary.pdf").read_bytes().startswith(b"%PDF")


def test_render_report_no_plots_and_skip_notes(tmp_path: Path) -> None:
    path = _result(tmp_path, drop=("sample_line_temperature",))
    out = render_report(path, tmp_path / "a", plots=False)
    # no figures, no PDF page; the steady-point tables are there
    assert sorted(p.suffix for p in out) == [".csv", ".json", ".md", ".xlsx"]
    out = render_report(path, tmp_path / "b")
    assert not (tmp_path / "b" / "night_water.png").exists()
    s = json.loads((tmp_path / "b" / "night_summary.json").read_text())
    assert "sample_line_temperature not logged" in s["skipped_figures"]["water"]
    assert "water: skipped" in (tmp_path / "b" / "night_summary.md").read_text()


def test_summary_without_flags_says_all_agree(tmp_path: Path) -> None:
    res = read_result(_result(tmp_path, flags=[]))
    s = build_summary(res)
    assert s["headline"].startswith("All instruments agree")
    assert "No flags." in markdown(s)


def test_long_night_renders_every_figure(tmp_path: Path) -> None:
    # A 12 h / 10 Hz night (432 000 rows) goes through the decimated plotting paths; its
    # speed is measured in benchmarks/, never asserted here.
    path = _result(tmp_path, rate_hz=10.0, hours=12.0, name="long.h5")
    out = render_report(path, tmp_path)
    assert sum(p.suffix == ".png" for p in out) == 7


def test_report_from_memory_equals_report_from_file(night: Path, tmp_path: Path) -> None:
    # process_to_files hands the series just written to the report instead of decoding them
    # again; the ResultFile and the summary must be the same either way.
    import h5py

    with h5py.File(night) as f:
        series = {n: f["timeseries"][n][()] for n in f["timeseries"]}
    a, b = read_result(night), read_result(night, series=series)
    pd.testing.assert_frame_equal(a.timeseries, b.timeseries)
    assert a.series_attrs == b.series_attrs and a.attrs == b.attrs
    pd.testing.assert_frame_equal(a.flags, b.flags)
    sa, sb = build_summary(a), build_summary(b)
    assert sa == sb
    with pytest.raises(ValueError, match="do not match"):
        read_result(night, series={k: v[:-1] for k, v in series.items()})


# ---------------------------------------------------------------------------------------
# the PDF page: the core font Helvetica when the text allows it, else the embedded default
# ---------------------------------------------------------------------------------------
def _page_fonts(pdf: bytes) -> set[str]:
    return set(re.findall(rb"/BaseFont /([A-Za-z0-9+-]+)", pdf))


def _embedded(pdf: bytes) -> bool:
    return b"/FontFile" in pdf or b"/CharProcs" in pdf


def test_pdf_uses_core_helvetica_for_latin_text(tmp_path: Path) -> None:
    s = build_summary(read_result(_result(tmp_path)))
    pdf = write_pdf(s, tmp_path / "a.pdf").read_bytes()
    assert pdf.startswith(b"%PDF")
    # PDF 32000-1:2008 §9.6.2.2: the 14 standard Type 1 fonts need no embedding.
    assert {b"Helvetica", b"Helvetica-Bold"} <= _page_fonts(pdf)
    assert not _embedded(pdf)
    streams = b"".join(
        zlib.decompress(m) for m in re.findall(rb"stream\r?\n(.*?)\r?\nendstream", pdf, re.S)
        if m[:1] == b"x"
    )
    assert b"Night summary" in streams  # the text is there as text


def test_pdf_falls_back_to_an_embedded_font_outside_windows_1252(tmp_path: Path) -> None:
    s = build_summary(read_result(_result(tmp_path)))
    s["description"] = "Pr\u00fcfstand B3, \u03bb-Sonde"  # Greek lambda: not in the core set
    pdf = write_pdf(s, tmp_path / "b.pdf").read_bytes()
    assert _embedded(pdf)
    assert b"Helvetica" not in b"".join(_page_fonts(pdf))


# ---------------------------------------------------------------------------------------
# a broken figure
# ---------------------------------------------------------------------------------------
def test_a_broken_figure_is_a_skip_with_its_reason(
    night: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # (Figures were drawn in a forked second process until the fork was removed from
    # library code; this part of the former two-process tests still holds.)
    from pipeline.report import emissions, render

    def broken(*_args: object) -> list[Path]:
        raise RuntimeError("boom")

    monkeypatch.setattr(emissions, "figure", broken)
    with pytest.warns(RuntimeWarning, match="boom"):
        paths, skipped = render.render_figures(read_result(night), tmp_path, "n")
    assert "internal error: boom" in skipped[emissions.NAME] and len(paths) == 6
    assert not list(tmp_path.glob("*.tmp"))


def test_steady_point_tables_hold_every_point_with_units(night: Path, tmp_path: Path) -> None:
    # The table a report is pasted from: one row per steady point, units in the headers,
    # the same means as the figures' (reportdata), residuals in percent.
    import pandas as pd

    from pipeline.report.point_table import write_point_tables

    res = read_result(night)
    paths = write_point_tables(res, tmp_path, "n")
    table = pd.read_csv(paths[0])
    pts = rd.steady_point_stats(res)
    assert len(table) == len(pts) and "speed [rpm]" in table and "carbon - flow [%]" in table
    np.testing.assert_allclose(table["carbon - flow [%]"],
                               100 * pts["residual_carbon_flow"], rtol=1e-5)
    if len(paths) > 1:  # XlsxWriter installed (reading it back would need another library)
        assert paths[1].suffix == ".xlsx" and paths[1].read_bytes()[:2] == b"PK"
