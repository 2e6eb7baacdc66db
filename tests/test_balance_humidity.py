"""Water vapour pressure, humidity and dew point against published values."""

import numpy as np
import pytest

from pipeline.balance.humidity import (
    dewpoint_from_x_h2o,
    dry_air_from_wet,
    p_sat_water_cfr_kPa,
    p_sat_water_if97_kPa,
    t_sat_water_if97_degC,
    x_h2o_from_dewpoint,
    x_h2o_from_g_per_kg,
    x_h2o_from_rh,
)


def test_cfr_1065_645_vapour_pressure_examples():
    # 40 CFR 1065.645 worked examples (REFERENCES 1.8): 9.5 degC -> 1.186581 kPa,
    # 20 degC -> 2.3371 kPa.
    assert p_sat_water_cfr_kPa(9.5) == pytest.approx(1.186581, abs=5e-7)
    assert p_sat_water_cfr_kPa(20.0) == pytest.approx(2.3371, abs=5e-5)


def test_cfr_1065_645_x_h2o_examples():
    # 40 CFR 1065.645(b) and (c) examples: dew point 9.5 degC at 99.980 kPa and RH 50.77 %
    # at 20 degC, 99.980 kPa both give 0.011868 mol/mol.
    assert x_h2o_from_dewpoint(9.5, 99.980) == pytest.approx(0.011868, abs=5e-7)
    assert x_h2o_from_rh(50.77, 20.0, 99.980) == pytest.approx(0.011868, abs=5e-7)


def test_cfr_vapour_pressure_agrees_with_iapws_if97():
    # Reference library iapws (IAPWS-IF97 region 4). REFERENCES 6.3 shows the CFR Goff form
    # runs about 0.1 % low at 20-60 degC and 0.16 % at 0 degC; tolerance 0.25 % over 0-100 degC.
    iapws97 = pytest.importorskip("iapws.iapws97")
    t = np.linspace(0.01, 100.0, 60)
    ref_kPa = np.array([iapws97._PSat_T(x + 273.15) * 1000.0 for x in t])
    np.testing.assert_allclose(p_sat_water_cfr_kPa(t), ref_kPa, rtol=2.5e-3)


def test_if97_saturation_matches_iapws_and_verification_values():
    # IAPWS R7-97(2012) verification values (REFERENCES 6.1): p_s(300 K) = 3.53658941 kPa,
    # p_s(500 K) = 2638.89776 kPa; T_s(0.1 MPa) = 372.755919 K, T_s(1 MPa) = 453.035632 K.
    assert p_sat_water_if97_kPa(300 - 273.15) == pytest.approx(3.53658941, rel=1e-8)
    assert p_sat_water_if97_kPa(500 - 273.15) == pytest.approx(2638.89776, rel=1e-8)
    assert t_sat_water_if97_degC(100.0) + 273.15 == pytest.approx(372.755919, abs=1e-6)
    assert t_sat_water_if97_degC(1000.0) + 273.15 == pytest.approx(453.035632, abs=1e-6)
    iapws97 = pytest.importorskip("iapws.iapws97")
    for p_kPa in (1.0, 7.0, 12.0, 50.0):
        ref = iapws97._TSat_P(p_kPa / 1000.0) - 273.15
        assert t_sat_water_if97_degC(p_kPa) == pytest.approx(ref, abs=1e-6)


def test_exhaust_dewpoint_against_iapws():
    # Exhaust with 12 % water at 101.325 kPa: water partial pressure 12.159 kPa; the dew point
    # is the IF97 saturation temperature at that pressure (iapws reference library).
    iapws97 = pytest.importorskip("iapws.iapws97")
    ref = iapws97._TSat_P(0.12 * 101.325 / 1000.0) - 273.15
    assert dewpoint_from_x_h2o(0.12, 101.325) == pytest.approx(ref, abs=1e-6)
    # Common practice: diesel exhaust dew points are around 45-55 degC.
    assert 45 < float(dewpoint_from_x_h2o(0.12, 101.325)) < 55


def test_g_per_kg_conversion_reproduces_iso_example():
    # REFERENCES 4.1 (ISO 8178 / NOx Technical Code, [S]): H_a = 7.554 g/kg -> 0.01200 mol/mol.
    assert x_h2o_from_g_per_kg(7.554) == pytest.approx(0.01200, abs=1e-5)


def test_dry_air_from_wet_mass_share():
    # Definition: dry air mass = wet mass x mass share of dry air; with x = 0.012 mol/mol the
    # humid air holds 0.012*18.01528 / (0.988*28.96559 + 0.012*18.01528) of water by mass.
    x = 0.012
    water_mass_share = x * 18.01528 / ((1 - x) * 28.96559 + x * 18.01528)
    assert dry_air_from_wet(1000.0, x) == pytest.approx(1000.0 * (1 - water_mass_share), rel=1e-4)
