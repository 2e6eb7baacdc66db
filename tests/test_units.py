"""Unit alias table: spellings, exact conversion factors, messages."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from pipeline.errors import ConfigError
from pipeline.quantities import INPUTS
from pipeline.units import accepted_units, conversion, converter, is_known_unit


def conv(unit: str, quantity: str, value: float, density: float | None = None) -> float:
    return float(converter(unit, quantity, "test", density)(np.array([value]))[0])


@pytest.mark.parametrize("unit", ["Nm", "N.m", "N m", "N·m", "N*m", " [Nm] ", "nm"])
def test_newton_metre_spellings(unit: str) -> None:
    # Common practice: torque columns labelled "Nm" mean newton metre, never nanometre.
    assert conv(unit, "torque", 1.0) == 1.0


def test_kilonewton_metre_and_pound_force_foot() -> None:
    assert conv("kN.m", "torque", 1.5) == pytest.approx(1500.0, rel=1e-15)
    # NIST SP 811 (2008) Appendix B.8: foot pound-force = 1.355818 J.
    assert conv("lbf.ft", "torque", 1.0) == pytest.approx(1.355818, rel=1e-6)
    assert conv("lbf ft", "torque", 2.0) == pytest.approx(2 * 1.355818, rel=1e-6)


@pytest.mark.parametrize(
    ("unit", "kpa"),
    [
        # SI Brochure, 9th ed. (2019), Table 8: 1 bar = 100 kPa; hence 1 mbar = 1 hPa = 0.1 kPa.
        ("bar", 100.0),
        ("mbar", 0.1),
        ("hPa", 0.1),
        ("Pa", 1e-3),
        ("kPa", 1.0),
        ("MPa", 1000.0),
        # NIST SP 811 (2008) Appendix B.8: psi = 6.894757 kPa; conventional inch of mercury
        # = 3.386389 kPa; conventional millimetre of mercury = 1.333224 E-01 kPa.
        ("psi", 6.894757),
        ("inHg", 3.386389),
        ("mmHg", 0.1333224),
    ],
)
def test_pressure_units(unit: str, kpa: float) -> None:
    assert conv(unit, "ambient_pressure", 1.0) == pytest.approx(kpa, rel=1e-6)


def test_pressure_case_tolerance_and_ambiguity() -> None:
    assert conv("KPA", "ambient_pressure", 1.0) == 1.0
    assert conv("MBAR", "exhaust_pressure", 10.0) == pytest.approx(1.0)
    with pytest.raises(ConfigError, match=r"'mPa' is ambiguous"):
        converter("mPa", "ambient_pressure", "[channels.ambient_pressure] unit")


@pytest.mark.parametrize(
    ("unit", "value", "kg_h"),
    [
        ("kg/h", 2.0, 2.0),
        ("g/s", 1.0, 3.6),  # 1 g/s * 3600 s/h / 1000 g/kg (SI prefixes)
        ("kg/s", 1.0, 3600.0),
        ("kg/min", 1.0, 60.0),
        ("g/h", 1000.0, 1.0),
        # International yard and pound agreement (1959): 1 lb = 0.45359237 kg exactly.
        ("lb/h", 1.0, 0.45359237),
        ("lb/min", 1.0, 60 * 0.45359237),
    ],
)
def test_mass_flow_units(unit: str, value: float, kg_h: float) -> None:
    assert conv(unit, "air_mass_flow", value) == pytest.approx(kg_h, rel=1e-14)


def test_volumetric_fuel_flow_needs_density() -> None:
    # 1 l/min = 60 l/h = 0.060 m3/h; times 745 kg/m3 = 44.7 kg/h (SI prefixes).
    assert conv("l/min", "fuel_mass_flow", 1.0, density=745.0) == pytest.approx(44.7, rel=1e-12)
    assert conv("l/h", "fuel_mass_flow", 10.0, density=832.0) == pytest.approx(8.32, rel=1e-12)
    with pytest.raises(ConfigError, match=r"'l/min'.*fuel density.*density_kg_per_m3"):
        converter("l/min", "fuel_mass_flow", "[channels.fuel_mass_flow] unit")
    with pytest.raises(ConfigError, match=r"air_mass_flow needs a mass flow unit"):
        converter("l/min", "air_mass_flow", "[channels.air_mass_flow] unit", 1.2)


@pytest.mark.parametrize(
    ("unit", "degc", "value"),
    [
        # Fahrenheit scale by definition: 32 degF = 0 degC, 212 degF = 100 degC, -40 = -40.
        ("degF", 0.0, 32.0),
        ("°F", 100.0, 212.0),
        ("F", -40.0, -40.0),
        # SI: T/K = t/degC + 273.15.
        ("K", 0.0, 273.15),
        ("kelvin", 25.0, 298.15),
        ("°C", 21.5, 21.5),
        ("degC", 21.5, 21.5),
        ("deg C", 21.5, 21.5),
        ("C", 21.5, 21.5),
        ("ºC", 21.5, 21.5),  # ordinal indicator typed for the degree sign
    ],
)
def test_temperature_units(unit: str, degc: float, value: float) -> None:
    assert conv(unit, "ambient_temperature", value) == pytest.approx(degc, abs=1e-12)


@pytest.mark.parametrize(
    ("unit", "factor"),
    [
        ("%", 1e-2), ("%vol", 1e-2), ("vol%", 1e-2), ("% vol", 1e-2), ("ppm", 1e-6),
        ("ppmv", 1e-6), ("ppb", 1e-9), ("mol/mol", 1.0), ("mmol/mol", 1e-3),
        ("umol/mol", 1e-6), ("\u00b5mol/mol", 1e-6), ("\u03bcmol/mol", 1e-6), ("-", 1.0),
        ("1", 1.0), ("fraction", 1.0),
    ],
)
def test_concentration_units(unit: str, factor: float) -> None:
    # SI prefixes (SI Brochure Table 7): per cent 1e-2, ppm 1e-6, ppb 1e-9 of a mole fraction.
    assert conv(unit, "co", 1.0) == pytest.approx(factor, rel=1e-15)


def test_ppmc_only_for_thc() -> None:
    assert conv("ppmC", "thc", 300.0) == pytest.approx(300e-6)
    assert conv("ppmC1", "thc", 1.0) == pytest.approx(1e-6)
    with pytest.raises(ConfigError, match=r"'ppmC'.*thc only"):
        converter("ppmC", "co", "[channels.co] unit")


def test_relative_humidity_units() -> None:
    for unit in ("%", "%RH", "% RH", "percent"):
        assert conv(unit, "ambient_humidity", 45.0) == 45.0
    for unit in ("-", "1", "fraction"):
        assert conv(unit, "ambient_humidity", 0.45) == pytest.approx(45.0)
    assert conv("g/kg", "intake_humidity", 8.0) == 8.0
    assert conv("kg/kg", "intake_humidity", 0.008) == pytest.approx(8.0)


def test_time_and_speed_units() -> None:
    assert conv("ms", "time", 1500.0) == pytest.approx(1.5)
    assert conv("min", "time", 2.0) == 120.0
    assert conv("h", "time", 1.0) == 3600.0
    for unit in ("rpm", "1/min", "min-1", "min^-1", "min\u207b\u00b9", "r/min", "RPM"):
        assert conv(unit, "speed", 1500.0) == 1500.0
    # Definition of the radian: one revolution = 2 pi rad.
    assert conv("rad/s", "speed", 2 * np.pi) == pytest.approx(60.0)


def test_dimensionless_lambda() -> None:
    for unit in ("-", "1", ""):
        assert conv(unit, "lambda_sensor", 1.02) == 1.02


def test_wrong_dimension_names_unit_quantity_where_and_accepted() -> None:
    with pytest.raises(ConfigError) as info:
        converter("kg/h", "torque", "[channels.torque] unit")
    msg = str(info.value)
    assert "'kg/h'" in msg and "torque" in msg and "[channels.torque] unit" in msg
    assert "mass flow" in msg and "Nm" in msg and "N.m" in msg


def test_unknown_unit_message() -> None:
    with pytest.raises(ConfigError, match=r"\[channels.speed\] unit: unit 'furlong/fortnight' "
                                          r"is not a known unit for speed.*rpm"):
        converter("furlong/fortnight", "speed", "[channels.speed] unit")


def test_converter_is_vectorised_float64() -> None:
    values = np.arange(5, dtype=np.int64)
    out = converter("degF", "ambient_temperature", "x")(values)
    assert out.dtype == np.float64 and out.shape == (5,)
    np.testing.assert_allclose(out, (values - 32.0) * 5.0 / 9.0, rtol=1e-15)


_ALL_SPELLINGS = sorted(
    {(q, u) for q in INPUTS for u in accepted_units(q) if "density" not in u}
)


@given(
    st.sampled_from(_ALL_SPELLINGS),
    st.sampled_from(["", " ", "  "]),
    st.sampled_from([("", ""), ("[", "]"), ("(", ")")]),
)
def test_every_listed_spelling_parses_with_blanks_and_brackets(
    qu: tuple[str, str], pad: str, brackets: tuple[str, str]
) -> None:
    quantity, unit = qu
    unit = "" if unit == "''" else unit
    plain = conversion(unit, quantity, "x")
    if unit == "":
        return
    wrapped = conversion(f"{pad}{brackets[0]}{unit}{brackets[1]}{pad}", quantity, "x")
    assert wrapped.same_as(plain)
    assert is_known_unit(unit)


# --- US and volumetric units of real cell exports -------------------------------------------
@pytest.mark.parametrize("unit", ["lb/hr", "lb/h", "lbm/hr", "[lb/hr]"])
def test_pound_per_hour(unit: str) -> None:
    # 1 lb = 0.45359237 kg exactly (international yard and pound agreement, 1959).
    assert conv(unit, "fuel_mass_flow", 10.0) == pytest.approx(4.5359237, rel=1e-15)


@pytest.mark.parametrize("unit", ["lb-ft", "ft-lb", "lbf-ft", "ft-lbf"])
def test_pound_foot_with_a_hyphen(unit: str) -> None:
    # NIST SP 811 (2008) Appendix B.8: foot pound-force = 1.355818 J.
    assert conv(unit, "torque", 1.0) == pytest.approx(1.355818, rel=1e-6)


def test_grains_per_pound() -> None:
    # 1 grain = 64.79891 mg, 1 lb = 453.59237 g (1959 agreement): 70 gr/lb = 10 g/kg.
    assert conv("gr/lb", "intake_humidity", 70.0) == pytest.approx(
        70 * 64.79891e-3 / 453.59237 * 1e3, rel=1e-9)
    assert conv("gr/lb", "intake_humidity", 70.0) == pytest.approx(10.0, rel=1e-9)


def test_standard_and_normal_volume_flow_of_air() -> None:
    # Handbook values (from memory): dry air at 0 degC, 101.325 kPa has 1.2922 kg/m3; at
    # 60 degF and 14.696 psia a standard cubic foot of air weighs about 0.0764 lb.
    assert conv("Nm3/h", "air_mass_flow", 100.0) == pytest.approx(129.22, rel=5e-4)
    lb_per_h = conv("SCFM", "air_mass_flow", 1.0) / 0.45359237
    assert lb_per_h == pytest.approx(0.0764 * 60.0, rel=3e-3)
    # another reference state, as the config states it: 20 degC, 101.325 kPa (1.2041 kg/m3)
    c = conversion("scfm", "air_mass_flow", "x", standard_state=(20.0, 101.325))
    assert c.scale == pytest.approx(1.2041 * 0.3048**3 * 60.0, rel=5e-4)


def test_gauge_pressure_is_marked() -> None:
    # NIST SP 811: 1 psi = 6.894757 kPa; a gauge reading still needs the ambient added.
    c = conversion("psig", "exhaust_pressure", "x")
    assert c.gauge and c.scale == pytest.approx(6.894757, rel=1e-6)
    assert not conversion("psia", "exhaust_pressure", "x").gauge


@pytest.mark.parametrize("unit", ["%vol dry", "% dry", "ppm (dry)", "ppm wet", "%vol, wet"])
def test_a_basis_inside_the_unit(unit: str) -> None:
    from pipeline.units import split_basis

    bare, basis = split_basis(unit)
    assert basis in ("dry", "wet") and bare
    assert conversion(unit, "co2", "x").same_as(conversion(bare, "co2", "x"))
