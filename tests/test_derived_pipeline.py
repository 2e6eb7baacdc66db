"""Derived results through the balance stage on constructed frames: hydrogen, condensation
risk, extra methods, drift correction and the emissions table."""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from pipeline.balance import compute_balance
from pipeline.balance.driftcor import apply_drift_correction
from pipeline.balance.tables import emissions_table
from pipeline.config import parse_config
from pipeline.fuels import load_presets
from pipeline.testing.simulate import dry_air_molar_mass, exhaust_composition


def _config(fuel=None, **extra):
    raw = {
        "fuel": fuel or {"preset": "diesel_2"},
        "channels": {
            "time": {"column": "t", "unit": "s"},
            "fuel_mass_flow": {"column": "f", "unit": "kg/h"},
            "air_mass_flow": {"column": "a", "unit": "kg/h", "basis": "dry"},
            "co2": {"column": "c", "unit": "mol/mol", "basis": "dry"},
            "co": {"column": "co", "unit": "mol/mol", "basis": "dry"},
            "o2": {"column": "o", "unit": "mol/mol", "basis": "dry"},
            "nox": {"column": "n", "unit": "mol/mol", "basis": "dry"},
            "speed": {"column": "s", "unit": "rpm"},
            "torque": {"column": "q", "unit": "N.m"},
        },
    }
    for key, value in extra.items():
        if key == "channels":
            raw["channels"].update(value)
        else:
            raw[key] = value
    return parse_config(raw, Path("test.toml"))


def _frame(fuel_name="diesel_2", lam=1.6, n=600, fuel_kg_h=10.0):
    """A steady constructed night from the forward model: dry air, dry analyzers, no
    chiller water."""
    fuel = load_presets()[fuel_name]
    ex = exhaust_composition(np.full(n, lam), fuel, 0.0, co_per_c=0.002, no_per_c=0.003)
    n_c = fuel_kg_h / 3.6 / fuel.molar_mass_per_c
    air = n_c * ex["n_air_dry_per_c"] * dry_air_molar_mass() * 3.6
    return pd.DataFrame({
        "time": np.arange(n, dtype=float),
        "fuel_mass_flow": np.full(n, fuel_kg_h), "air_mass_flow": air,
        "co2": ex["co2_dry"], "co": ex["co_dry"], "o2": ex["o2_dry"],
        "nox": ex["no_dry"] + ex["no2_dry"],
        "speed": np.full(n, 2000.0), "torque": np.full(n, 150.0),
    }), ex


def test_hydrogen_engine_lambda_from_o2_and_no_carbon_balance():
    # Hydrogen in CFR dry air at lambda 2 (complete combustion): per mol H2, 0.5 mol O2
    # needed; supplied 1.0 mol O2 = 1/0.209445 mol dry air; dry exhaust O2 fraction
    # 0.5 / (1/0.209445 - 0.5) (our bookkeeping, checked against Cantera in
    # test_balance_lambda). lambda_carbon must be NaN with a note, not a number.
    n = 10
    a = 1.0 / 0.209445
    o2_dry = 0.5 / (a - 0.5)
    fuel_kg_h = 1.0
    air = fuel_kg_h / 2.01588 * a * 28.96559
    frame = pd.DataFrame({
        "time": np.arange(n, dtype=float), "fuel_mass_flow": np.full(n, fuel_kg_h),
        "air_mass_flow": np.full(n, air), "co2": np.full(n, 375e-6 * a / (a - 0.5)),
        "o2": np.full(n, o2_dry), "nox": np.full(n, 50e-6),
    })
    cfg = _config(fuel={"preset": "hydrogen"})
    out = compute_balance(frame, cfg)
    d = out.derived
    assert np.isnan(d["lambda_carbon"]).all()
    np.testing.assert_allclose(d["lambda_oxygen"], 2.0, rtol=1e-6)
    np.testing.assert_allclose(d["lambda_flow"], 2.0, rtol=1e-4)
    # Water: 1 mol per mol H2 over a wet exhaust of (a - 0.5) + 1 mol.
    np.testing.assert_allclose(d["exhaust_water_fraction"], 1.0 / (a + 0.5), rtol=1e-6)
    assert any("no carbon" in w for w in out.warnings)
    assert np.isfinite(d["nox_mass_flow"]).all()


def _stage_flags(frame: pd.DataFrame, out, cfg) -> pd.DataFrame:
    """The flags the checks stage raises on this balance output (flags are raised there)."""
    from pipeline.checks import CheckSettings, run_checks

    return run_checks(frame, out.derived, CheckSettings.from_config(cfg), has_sensor=False,
                      sampling_state=out.sampling_state).flags


def test_condensation_risk_flag_when_line_is_below_dew_point():
    frame, _ = _frame()
    frame["sample_line_temperature"] = np.where(frame["time"] < 300, 190.0, 40.0)
    cfg = _config(channels={"sample_line_temperature": {"column": "l", "unit": "degC"}})
    out = compute_balance(frame, cfg)
    flags = _stage_flags(frame, out, cfg)
    flags = flags[flags["check"] == "condensation_risk"]
    assert len(flags) == 1 and flags["start_s"].iloc[0] == 300.0
    # The diesel exhaust dew point at lambda 1.6 is about 43 degC (IF97, dry intake air):
    # 40 degC is below it, so the margin value is negative.
    assert flags["value"].iloc[0] < 0


def test_extra_methods_and_spindt_invalid_for_oxygenated_fuel():
    frame, _ = _frame()
    out = compute_balance(frame, _config(methods={"extra_lambda": ["spindt", "iso16183"]}))
    np.testing.assert_allclose(out.derived["lambda_spindt"], 1.6, rtol=5e-3)
    np.testing.assert_allclose(out.derived["lambda_iso16183"], 1.6, rtol=5e-3)
    frame, _ = _frame("e85", lam=1.1)
    cfg = _config(fuel={"preset": "e85"}, methods={"extra_lambda": ["spindt"]})
    out = compute_balance(frame, cfg)
    assert np.isnan(out.derived["lambda_spindt"]).all()
    assert "method_invalid" in set(_stage_flags(frame, out, cfg)["check"])


def test_drift_correction_and_emissions_table_with_validation():
    # A CO2 analyzer reading 2 % high in span, with zero/span windows at start and end:
    # 1065.672 brings it back; the 1065.550 comparison reports the ~2 % difference.
    n = 4000
    frame, ex = _frame(n=n)
    mode = np.zeros(n)
    mode[0:300], mode[300:600] = 1, 2
    mode[3400:3700], mode[3700:4000] = 1, 2
    co2 = frame["co2"].to_numpy() * 1.02
    co2 = np.where(mode == 1, 0.0, np.where(mode == 2, 0.12 * 1.02, co2))
    frame["co2"] = co2
    frame["analyzer_mode"] = mode
    cfg = _config(channels={"analyzer_mode": {"column": "m"}},
                  drift_correction={"settle_s": 30, "co2": {"span_gas": 0.12}})
    corrected, readings, notes = apply_drift_correction(frame, cfg)
    assert set(readings["kind"]) == {"zero", "span"} and not notes
    sampling = mode == 0
    np.testing.assert_allclose(corrected["co2"].to_numpy()[sampling], ex["co2_dry"][sampling],
                               rtol=1e-12)
    unc = compute_balance(frame, cfg).derived
    cor = compute_balance(corrected, cfg).derived
    series = pd.concat([frame, unc], axis=1)
    table = emissions_table(series, [("SP01", 600.0, 3399.0)], cfg.fuel, cfg.verification, cor)
    assert list(table["label"]) == ["SP01", "night"]
    diff = table["co2_driftcor_diff"].iloc[0]
    assert diff == pytest.approx(1 / 1.02 - 1, abs=2e-3)
    assert table["drift_validation"].iloc[0] == "pass"  # |-2 %| <= 4 % (1065.550, [M])
    # Brake-specific: work = P t; P = 2 pi (2000/60) 150 W = 31.416 kW (definition).
    assert table["brake_power"].iloc[0] == pytest.approx(31.4159, rel=1e-4)
    assert table["bsfc_g_per_kWh"].iloc[0] == pytest.approx(10_000 / 31.4159, rel=1e-3)
    assert table["carbon_balance_verdict"].iloc[0] == "no limit configured"


def test_span_gas_without_mode_channel_is_not_taken_for_exhaust():
    # CO2 span gas at one analyzer and air at the O2 analyzer (CO2 + O2 = 0.33) cannot be
    # combustion exhaust: in exhaust CO2 + O2 stays below air's 0.2098 (REFERENCES 1.2).
    frame, _ = _frame(n=100)
    frame.loc[40:59, "co2"] = 0.12
    frame.loc[40:59, "o2"] = 0.2095
    cfg = _config()
    out = compute_balance(frame, cfg)
    sampling = out.derived["sampling"].to_numpy()
    # Widened by the 5 s response guard ([sampling] not_sampling_guard_s) on both sides.
    assert sampling[35:65].sum() == 0 and sampling[:35].all() and sampling[65:].all()
    assert np.isnan(out.derived["lambda_oxygen"].to_numpy()[40:60]).all()
    flags = _stage_flags(frame, out, cfg)
    flags = flags[flags["check"] == "analyzer_not_sampling"]
    assert len(flags) == 1 and "span gas" in flags["message"].iloc[0]


def test_logged_dryer_dewpoint_channel_sets_the_sample_water():
    # 40 CFR 1065.645(b): water after the chiller = p_sat(T_dew) / p. Readings taken after a
    # 4 degC chiller (x = 0.8 % at 101.325 kPa) and corrected with the logged dew point give
    # the same lambda as bone-dry readings.
    from pipeline.balance.humidity import x_h2o_from_dewpoint

    frame, _ = _frame(n=50)
    dry = compute_balance(frame, _config()).derived["lambda_carbon"].to_numpy()
    x_w = float(x_h2o_from_dewpoint(4.0, 101.325))
    wet_sample = frame.copy()
    for g in ("co2", "co", "o2", "nox"):
        wet_sample[g] = frame[g] * (1 - x_w)
    wet_sample["dryer_dewpoint"] = 4.0
    cfg = _config(channels={"dryer_dewpoint": {"column": "dp", "unit": "degC"}})
    lam = compute_balance(wet_sample, cfg).derived["lambda_carbon"].to_numpy()
    np.testing.assert_allclose(lam, dry, rtol=1e-9)
