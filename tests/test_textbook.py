"""The textbook case end to end, and constants pinned to published values.

Octane burned with 150 % theoretical air, air taken as O2 + 3.76 N2, complete combustion
(a standard worked example of combustion textbooks; common practice):

    C8H18 + 18.75 (O2 + 3.76 N2) -> 8 CO2 + 9 H2O + 6.25 O2 + 70.5 N2

Dry products: CO2 8/84.75 = 9.44 %, O2 6.25/84.75 = 7.37 %, N2 70.5/84.75 = 83.19 %; water
9/93.75 = 9.60 % of the wet products; 9 kmol water per kmol fuel; 8 x 44.01 / 114.23 =
3.08 kg CO2 per kg fuel. dynoqc's air is fuller (argon 0.934 %, CO2 375 umol/mol, O2
20.9445 %, 40 CFR 1065.655 defaults), so its N2 + Ar / O2 is 3.773 instead of 3.76: the test
states and bounds what that changes. Molar masses typed here are the 40 CFR 1065.1005 values
(C 12.0107, H 1.00794, O 15.9994, N 14.0067 g/mol), never the module's constants.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from conftest import SAMPLE_CONFIG

from pipeline import constants as C
from pipeline import process_run
from pipeline.fuels import Fuel
from pipeline.testing.cell_b3 import METADATA, cell_b3_scenario
from pipeline.testing.simulate import OperatingPoint, make_night, write_csv

M_C, M_H, M_O, M_N = 12.0107, 1.00794, 15.9994, 14.0067  # 40 CFR 1065.1005
M_OCTANE = 8 * M_C + 18 * M_H
M_H2O = 2 * M_H + M_O
M_CO2 = M_C + 2 * M_O


@pytest.fixture(scope="module")
def octane_night(tmp_path_factory: pytest.TempPathFactory):
    """One hour of an engine on octane at lambda 1.5, dry intake air, complete combustion."""
    octane = Fuel("octane", 18 / 8)
    points = [OperatingPoint(2000, 150, 1.5, 10.0, hold_s=1800, ramp_s=60, co_per_c=0.0,
                             thc_per_c=0.0, no_per_c=0.0),
              OperatingPoint(2500, 200, 1.5, 14.0, hold_s=1800, ramp_s=60, co_per_c=0.0,
                             thc_per_c=0.0, no_per_c=0.0)]
    sc = dataclasses.replace(cell_b3_scenario(), fuel=octane, points=points, duration_h=1.0,
                             faults=[], cal_windows=[], dropouts=[], line_heater_trips=[],
                             ambient_rh_start_percent=0.0, ambient_rh_end_percent=0.0,
                             dryer_dewpoint_degC=-60.0, seed=1,
                             noise={k: (0.0, 0.0) for k in cell_b3_scenario().noise})
    log, _ = make_night(sc)
    folder = tmp_path_factory.mktemp("octane")
    path = folder / "octane.csv"
    write_csv(log, path, units=log.attrs["units"], metadata=METADATA)
    cfg = folder / "octane.toml"
    text = SAMPLE_CONFIG.read_text().replace('preset = "diesel_2"', "h_c = 2.25")
    text = text.replace("dryer_dewpoint_degC = 4.0", "dryer_dewpoint_degC = -60.0")
    cfg.write_text(text)
    return process_run(path, cfg)


def _steady(res, name: str) -> float:
    s = res.series
    use = (s["steady"].to_numpy() > 0) & (s["valid"].to_numpy() > 0)
    return float(np.median(s[name].to_numpy()[use]))


def test_octane_150_percent_theoretical_air(octane_night) -> None:
    res = octane_night
    assert _steady(res, "lambda_carbon") == pytest.approx(1.5, rel=2e-3)
    assert _steady(res, "lambda_oxygen") == pytest.approx(1.5, rel=2e-3)
    x_w = _steady(res, "exhaust_water_fraction")
    # Water of the wet products: 9/93.75 = 9.600 % with O2 + 3.76 N2; dynoqc's fuller air
    # holds 0.3 % more moles per mole O2 (3.773 vs 3.76), so 9.59 %: within 0.05 points.
    assert x_w == pytest.approx(9 / 93.75, abs=5e-4)
    co2_dry = _steady(res, "co2_wet") / (1 - x_w)
    o2_dry = _steady(res, "o2_wet") / (1 - x_w)
    # Dry CO2 9.44 % and O2 7.37 %: the fuller air adds 0.013 mol N2 + Ar per mol O2 and
    # 375 umol/mol of intake CO2 (+0.03 points of CO2): within 0.06 points each.
    assert co2_dry == pytest.approx(8 / 84.75, abs=6e-4)
    assert o2_dry == pytest.approx(6.25 / 84.75, abs=6e-4)
    assert 1 - co2_dry - o2_dry == pytest.approx(70.5 / 84.75, abs=1e-3)  # N2 (+ Ar)
    # 9 kmol water per kmol octane (the fuel's own hydrogen): 9 M_H2O / M_C8H18 per kg.
    assert _steady(res, "combustion_water_per_kg_fuel") == pytest.approx(
        9 * M_H2O / M_OCTANE, rel=1e-3)
    # 8 kmol CO2 per kmol octane: 3.08 kg CO2 per kg fuel (the intake CO2 not counted).
    assert _steady(res, "co2_per_kg_fuel") == pytest.approx(8 * M_CO2 / M_OCTANE, rel=1e-3)
    assert 8 * M_CO2 / M_OCTANE == pytest.approx(3.08, abs=0.005)


def test_exhaust_mass_flow_is_intake_air_plus_fuel(octane_night) -> None:
    # Mass balance (common practice): everything that goes in comes out. Dry intake air
    # here, so the exhaust mass flow is the air meter's reading plus the fuel flow.
    s = octane_night.series
    use = (s["steady"].to_numpy() > 0) & (s["valid"].to_numpy() > 0)
    np.testing.assert_allclose(
        s["exhaust_mass_flow"].to_numpy()[use],
        s["air_mass_flow"].to_numpy()[use] + s["fuel_mass_flow"].to_numpy()[use], rtol=1e-9)


def test_molar_masses_are_the_published_values() -> None:
    # 40 CFR 1065.1005(f)(2) (values from memory of that table): NO2 46.0055, CO2 44.0095,
    # CO 28.0101, H2O 18.01528, dry air 28.96559 g/mol; NOx is always reported as NO2.
    assert C.M_NO2 == pytest.approx(46.0055, abs=1e-4)
    assert C.M_CO2 == pytest.approx(44.0095, abs=1e-4)
    assert C.M_CO == pytest.approx(28.0101, abs=1e-4)
    assert C.M_H2O == pytest.approx(18.01528, abs=1e-4)
    assert C.M_AIR == pytest.approx(28.96559, abs=1e-4)
    assert C.M_C == 12.0107


def test_sulfur_needs_oxygen() -> None:
    # Stoichiometry (common practice): CH_a O_b S_g burns to CO2, H2O and SO2, so it needs
    # 1 + a/4 - b/2 + g mol O2 per mol C; a fuel with 1 % S per C needs 1 % more O2 per C.
    plain, sour = Fuel("a", 1.8), Fuel("b", 1.8, s_c=0.01)
    assert plain.o2_stoich_per_c == pytest.approx(1.45, rel=1e-12)
    assert sour.o2_stoich_per_c == pytest.approx(1.46, rel=1e-12)


def test_rich_combustion_water_counts_the_hydrogen_left_unburned(tmp_path: Path) -> None:
    # At lambda 0.8 part of the fuel hydrogen leaves as H2 (water-gas equilibrium); the water
    # formed is the fuel's hydrogen less that H2. The forward model (element-exact, written
    # apart from the balance) gives the H2; the balance must not count it as water.
    from pipeline.balance import chemical_balance
    from pipeline.balance.emissions import water_and_co2_per_kg_fuel
    from pipeline.testing.simulate import exhaust_composition

    fuel = Fuel("gasoline", 1.85)
    ex = exhaust_composition(np.array([0.8]), fuel, 0.0, co_per_c=0.0)
    chem = chemical_balance(fuel, ex["co2_dry"], ex["co_dry"], ex["thc"], x_h2o_int=0.0)
    h2_per_c = float(ex["h2"][0] * ex["n_wet_per_c"][0])
    assert h2_per_c > 0.1  # rich: a good part of the hydrogen is left as H2
    water = (1.85 / 2 - h2_per_c) * M_H2O / (M_C + 1.85 * M_H)
    got = water_and_co2_per_kg_fuel(chem, fuel)["combustion_water_per_kg_fuel"][0]
    assert got == pytest.approx(water, rel=2e-3)
