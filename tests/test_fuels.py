"""Fuel composition and stoichiometric air/fuel ratios."""

import pytest

from pipeline.fuels import Fuel, fuel_from_mass_fractions, load_presets


def test_mass_fractions_1065_656_d_example():
    # 40 CFR 1065.656(d)(2) example (REFERENCES 1.3): alpha 1.8, beta 0.05, gamma 0.0003,
    # delta 0.0001 -> w_C 0.820628, w_H 0.123961, w_O 0.0546578, w_S 0.00065725,
    # w_N 0.0000957004.
    f = Fuel("x", h_c=1.8, o_c=0.05, s_c=0.0003, n_c=0.0001)
    assert f.w_c == pytest.approx(0.820628, abs=1e-6)
    assert f.w_h == pytest.approx(0.123961, abs=1e-6)
    assert f.w_o == pytest.approx(0.0546578, abs=1e-7)
    assert f.w_s == pytest.approx(0.00065725, abs=1e-8)
    assert f.w_n == pytest.approx(0.0000957004, abs=1e-10)


def test_atomic_ratios_from_mass_fractions_round_trip():
    # Inverse of 1065.656(d) (REFERENCES 1.3 [C]) applied to the CFR example values.
    f = fuel_from_mass_fractions("x", 0.820628, 0.123961, 0.0546578, 0.00065725, 0.0000957004)
    assert f.h_c == pytest.approx(1.8, rel=1e-5)
    assert f.o_c == pytest.approx(0.05, rel=1e-5)


@pytest.mark.parametrize(
    ("preset", "w_c"),
    [
        # 40 CFR 1065.655(e) default fuel table, w_C column (REFERENCES 1.3, [C]).
        ("gasoline", 0.866),
        ("e10", 0.833),
        ("e85", 0.576),
        ("diesel_1", 0.861),
        ("diesel_2", 0.869),
        ("lpg", 0.819),
        ("natural_gas", 0.747),
        ("ethanol", 0.521),
        ("methanol", 0.375),
    ],
)
def test_preset_carbon_fraction_matches_cfr_table(preset, w_c):
    assert load_presets()[preset].w_c == pytest.approx(w_c, abs=6e-4)


@pytest.mark.parametrize(
    ("preset", "lo", "hi"),
    [
        # Commonly quoted stoichiometric ratios (common practice; REFERENCES 5 [S]).
        ("gasoline", 14.5, 14.8),
        ("diesel_2", 14.4, 14.7),
        ("e85", 9.6, 10.0),
        ("ethanol", 8.9, 9.1),
        ("methanol", 6.4, 6.5),
        ("methane", 17.1, 17.3),
        ("propane", 15.6, 15.8),
        ("lpg", 15.5, 15.9),
    ],
)
def test_preset_stoichiometric_afr_commonly_quoted(preset, lo, hi):
    assert lo <= load_presets()[preset].afr_stoich <= hi


def test_stoichiometric_afr_against_cantera():
    # Cantera 3.x stoich_air_fuel_ratio (mass ratio) for methane and propane in the CFR dry air
    # given on a mole basis (REFERENCES 1.2): O2 0.209445, CO2 375e-6 (carried along as
    # oxidizer-side inert), Ar 0.00934, N2 0.78084.
    ct = pytest.importorskip("cantera")
    gas = ct.Solution("gri30.yaml")
    air = "O2:0.209445, CO2:0.000375, AR:0.00934, N2:0.78084"
    presets = load_presets()
    for name, species in (("methane", "CH4"), ("propane", "C3H8")):
        ref = gas.stoich_air_fuel_ratio(species, air, basis="mole")
        assert presets[name].afr_stoich == pytest.approx(ref, rel=2e-4)


def test_blend_by_mass_1065_656_d3_example():
    # 40 CFR 1065.656(d)(3) example (REFERENCES 1.3, [V-ex]): diesel 0.5352 g/s
    # (alpha 1.8, beta 0.05, gamma 0.0003, delta 0.0001; w_C 0.820628, w_H 0.123961) plus
    # NH3 7.024 g/s (w_H 0.177553, w_N 0.822447) -> w_C 0.0581014, w_H 0.1737586.
    from pipeline.fuels import blend_by_mass

    diesel = Fuel("diesel", h_c=1.8, o_c=0.05, s_c=0.0003, n_c=0.0001)
    nh3 = Fuel("ammonia", c=0.0, h_c=3.0, n_c=1.0)
    assert nh3.w_h == pytest.approx(0.177553, abs=1e-6)
    assert nh3.w_n == pytest.approx(0.822447, abs=1e-6)
    mix = blend_by_mass("mix", [(diesel, 0.5352), (nh3, 7.024)])
    assert mix.w_c == pytest.approx(0.0581014, abs=1e-7)
    assert mix.w_h == pytest.approx(0.1737586, abs=1e-7)


def test_hydrogen_preset_has_no_carbon():
    # 40 CFR 1065.656(e): hydrogen C0H2O0S0N0. Stoichiometric ratio 34.3 (common practice,
    # REFERENCES 5).
    h2 = load_presets()["hydrogen"]
    assert not h2.has_carbon and h2.w_c == 0.0
    assert h2.afr_stoich == pytest.approx(34.30, abs=0.01)
