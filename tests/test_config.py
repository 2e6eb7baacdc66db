"""Config parsing: contract keys, defaults, round trip of the resolved config."""

import tomllib
from pathlib import Path

import pytest
from conftest import ROOT, minimal_raw_config

from pipeline.config import load_config, parse_config
from pipeline.errors import ConfigError


def test_sample_config_loads_and_resolved_toml_round_trips():
    cfg = load_config(ROOT / "configs" / "cell_b3.toml")
    again = parse_config(tomllib.loads(cfg.to_toml()), Path("resolved.toml"))
    assert again.fuel.afr_stoich == pytest.approx(cfg.fuel.afr_stoich, rel=1e-12)
    assert again.channels == cfg.channels
    assert again.sampling == cfg.sampling
    assert again.drift_correction == cfg.drift_correction


def _minimal(**extra):
    raw = minimal_raw_config()
    raw.update(extra)
    return raw


@pytest.mark.parametrize(
    ("extra", "match"),
    [
        ({"method": {}}, 'Did you mean "methods"'),
        ({"methods": {"extra_lambda": ["spindtt"]}}, 'Did you mean "spindt"'),
        ({"drift_correction": {"co2": {"pre_zero": 0.0}}}, "needs span_gas"),
        ({"drift_correction": {"nox": {"span_gas": 1500}}}, "not mapped"),
        ({"drift_correction": {"settle": 30}}, 'Did you mean "settle_s"'),
        ({"verification": {"eps_rc_max": 0.02}}, 'Did you mean "eps_rC_max"'),
        ({"sampling": {"dryer_dewpoint": 4}}, 'Did you mean "dryer_dewpoint_degC"'),
    ],
)
def test_config_errors_name_the_key_and_the_fix(extra, match):
    with pytest.raises(ConfigError, match=match):
        parse_config(_minimal(**extra), Path("cell.toml"))


def test_blend_and_methods_and_drift_tables_parse():
    cfg = parse_config(
        _minimal(
            fuel={"blend": {"diesel_2": 0.9, "ethanol": 0.1}},
            methods={"extra_lambda": ["spindt", "iso16183"]},
            drift_correction={"settle_s": 30, "co2": {"span_gas": 12.0}},
            verification={"eps_rC_max": 0.02},
        ),
        Path("cell.toml"),
    )
    assert cfg.fuel.o_c > 0 and cfg.extra_lambda == ("spindt", "iso16183")
    assert cfg.drift_correction.gases["co2"].span_gas == 12.0
    assert cfg.verification.eps_rC_max == 0.02


def test_every_bad_unit_in_one_message_and_a_basis_in_the_unit_must_agree():
    raw = _minimal()
    raw["channels"]["fuel_mass_flow"]["unit"] = "lbs per hr"
    raw["channels"]["co2"]["unit"] = "%vol wet"  # basis = "dry"
    raw["channels"]["torque"] = {"column": "tq", "unit": "ft-lb"}  # fine
    with pytest.raises(ConfigError) as exc:
        parse_config(raw, Path("cell.toml"))
    text = str(exc.value)
    assert "2 units are not right" in text
    assert "fuel_mass_flow" in text and "'lbs per hr'" in text
    assert "[channels.co2] unit '%vol wet' says wet" in text
    raw["channels"]["fuel_mass_flow"]["unit"] = "lb/hr"
    raw["channels"]["co2"]["unit"] = "%vol dry"
    cfg = parse_config(raw, Path("cell.toml"))
    assert cfg.channels["co2"].basis == "dry"


def test_standard_state_of_volume_flows_is_checked():
    cfg = parse_config(_minimal(input={"standard_temperature_degC": 20.0}), Path("c.toml"))
    assert cfg.input.standard_state == (20.0, 101.325)
    with pytest.raises(ConfigError, match="standard_pressure_kPa must be between"):
        parse_config(_minimal(input={"standard_pressure_kPa": 14.7}), Path("c.toml"))


@pytest.mark.parametrize(
    ("line", "match"),
    [
        ("[sampling]\nanalyzer_delay_s = nan", "analyzer_delay_s must be a finite number"),
        ("[sampling]\ndryer_dewpoint_degC = inf", "dryer_dewpoint_degC must be a finite"),
        ("[sampling]\nanalyzer_delay_s = -3.0", "outside its physical range"),
        ("[sampling]\nnox_no2_fraction = 5", "outside its physical range"),
        ("[checks]\ndisagreement_tolerance = 5", "is a fraction"),
        ("[checks]\nsteady_window_s = nan", "must be a finite number"),
    ],
)
def test_meaningless_numbers_are_refused_with_key_and_line(tmp_path, line, match):
    # A value that makes the result meaningless is refused at load (exit 2), never run.
    header, key_line = line.split("\n")
    text = (ROOT / "configs" / "cell_b3.toml").read_text()
    key = key_line.split("=")[0].strip()
    lines = [ln for ln in text.splitlines() if not ln.startswith(f"{key} =")]
    text = "\n".join(lines) + "\n"
    if f"\n{header}\n" in text:  # a key of an existing table: right below its header
        text = text.replace(f"\n{header}\n", f"\n{header}\n{key_line}\n", 1)
    else:
        text += f"\n{header}\n{key_line}\n"
    path = tmp_path / "c.toml"
    path.write_text(text)
    with pytest.raises(ConfigError, match=match) as exc:
        load_config(path)
    if header == "[sampling]":  # the line of the key is named
        n = text.splitlines().index(key_line) + 1
        assert f"line {n}" in str(exc.value)


def test_text_for_a_number_and_one_column_for_two_channels():
    raw = _minimal()
    raw["fuel"] = {"h_c": 1.8, "lhv_MJ_per_kg": "abc"}
    with pytest.raises(ConfigError, match="lhv_MJ_per_kg must be a number"):
        parse_config(raw, Path("c.toml"))
    raw = _minimal()
    raw["channels"]["o2"]["column"] = "c"  # the CO2 column
    with pytest.raises(ConfigError, match=r"column 'c' is mapped to \[channels.co2\] and "
                                          r"\[channels.o2\]"):
        parse_config(raw, Path("c.toml"))
