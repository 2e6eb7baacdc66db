"""Carbon balance (40 CFR 1065.655) and oxygen balance (Brettschneider) against outside values."""

import numpy as np
import pytest

from pipeline.balance.chemical import chemical_balance
from pipeline.balance.flows import lambda_from_flows
from pipeline.balance.oxygen import lambda_brettschneider
from pipeline.fuels import Fuel, load_presets

# REFERENCES 8, case A (lean diesel) and case B (rich gasoline): computed test vectors [D]
# made by an independent stoichiometric forward model; not published values.
CASE_A = dict(
    fuel=Fuel("diesel", 1.80),
    co2=0.09423374, co=1.88156291e-4, no=3.76312581e-4, o2=0.08184854, thc_wet=4.28706653e-5,
    x_h2o_int=0.012,
)
CASE_B = dict(
    fuel=Fuel("gasoline", 1.85),
    co2=0.14199325, co=1.75431833e-2, no=7.96338243e-5, o2=0.0, thc_wet=1.10355358e-4,
    x_h2o_int=0.012,
)


def _solve(case):
    return chemical_balance(
        case["fuel"], [case["co2"]], [case["co"]], [case["thc_wet"]], [case["no"]],
        x_h2o_int=case["x_h2o_int"],
    )


def test_chemical_balance_case_a_lean_diesel():
    # REFERENCES 8 case A solution table.
    r = _solve(CASE_A)
    assert r.x_h2o_exh[0] == pytest.approx(0.08861585, abs=2e-8)
    assert r.x_h2o_exhdry[0] == pytest.approx(0.09723216, abs=2e-8)
    assert r.x_ccombdry[0] == pytest.approx(0.09407815, abs=2e-8)
    assert r.x_h2_dry[0] == pytest.approx(5.284e-5, abs=1e-8)
    assert r.x_int_exhdry[0] == pytest.approx(0.65921648, abs=1e-7)
    assert r.x_dil_exhdry[0] == pytest.approx(0.39553414, abs=1e-7)
    assert r.x_raw_exhdry[0] == pytest.approx(0.70169802, abs=1e-7)
    assert r.x_o2_int[0] == pytest.approx(0.20693166, abs=1e-8)
    assert r.lambda_[0] == pytest.approx(1.600000, abs=1e-6)


def test_chemical_balance_case_b_rich_gasoline():
    # REFERENCES 8 case B solution table.
    r = _solve(CASE_B)
    assert r.x_h2o_exh[0] == pytest.approx(0.13388438, abs=2e-8)
    assert r.x_ccombdry[0] == pytest.approx(0.15926765, abs=2e-8)
    assert r.x_h2_dry[0] == pytest.approx(5.45666e-3, abs=1e-8)
    assert r.x_int_exhdry[0] == pytest.approx(1.06935057, abs=1e-7)
    assert abs(r.x_dil_exhdry[0]) < 1e-6
    assert r.lambda_[0] == pytest.approx(0.950000, abs=1e-6)


def test_chemical_balance_is_vectorised_and_converges_fast():
    # The same two cases in one call give the same answers (vectorised solve).
    n = 1000
    co2 = np.r_[np.full(n, CASE_A["co2"]), np.full(n, CASE_B["co2"])]
    co = np.r_[np.full(n, CASE_A["co"]), np.full(n, CASE_B["co"])]
    r = chemical_balance(Fuel("x", 1.80), co2, co, x_h2o_int=0.012)
    assert r.lambda_.shape == (2 * n,)
    assert r.iterations < 40


def test_dry_analyzer_with_residual_water_and_wet_analyzer_agree():
    # Basis handling: the same exhaust read dry after a 4 degC chiller (water 0.8 %) or wet
    # (at the exhaust water of case A) must give the same lambda (40 CFR 1065.656(c)(1)).
    r0 = _solve(CASE_A)
    x_w = r0.x_h2o_exh[0]
    x_chill = 0.008
    dry_to_chill = 1 - x_chill
    r_chill = chemical_balance(
        CASE_A["fuel"], [CASE_A["co2"] * dry_to_chill], [CASE_A["co"] * dry_to_chill],
        [CASE_A["thc_wet"]], [CASE_A["no"] * dry_to_chill], x_h2o_int=0.012, x_h2o_dryer=x_chill,
    )
    r_wet = chemical_balance(
        CASE_A["fuel"], [CASE_A["co2"] * (1 - x_w)], [CASE_A["co"] * (1 - x_w)],
        [CASE_A["thc_wet"]], [CASE_A["no"] * (1 - x_w)], x_h2o_int=0.012,
        basis={"co2": "wet", "co": "wet", "no": "wet"},
    )
    assert r_chill.lambda_[0] == pytest.approx(1.6, abs=1e-6)
    assert r_wet.lambda_[0] == pytest.approx(1.6, abs=1e-6)


def test_brettschneider_published_form_on_reference_cases():
    # REFERENCES 8: Brettschneider gives 1.59753 on case A and 0.95103 on case B (computed
    # vectors [D]); THC converted to dry with the exhaust water of the case.
    for case, expected, x_w in ((CASE_A, 1.59753, 0.08861585), (CASE_B, 0.95103, 0.13388438)):
        lam = lambda_brettschneider(
            case["fuel"], case["co2"], case["o2"], case["co"], case["thc_wet"] / (1 - x_w),
            case["no"],
        )
        assert lam == pytest.approx(expected, abs=2e-5)


def test_brettschneider_reduces_to_o2_ratio_for_complete_combustion():
    # Derivation check (REFERENCES 2): with complete combustion of CH2 in O2/N2 air at
    # lambda 1.5, the formula returns O2 supplied / O2 needed exactly. Per mol C: O2 needed
    # 1.5, supplied 2.25; dry products CO2 1, O2 0.75, N2 2.25*3.76.
    n2 = 2.25 * 3.76
    total = 1 + 0.75 + n2
    lam = lambda_brettschneider(Fuel("ch2", 2.0), 1 / total, 0.75 / total)
    assert lam == pytest.approx(1.5, rel=1e-12)


def _cantera_exhaust(species, lam, temperature):
    ct = pytest.importorskip("cantera")
    gas = ct.Solution("gri30.yaml")
    air = "O2:0.209445, CO2:0.000375, AR:0.00934, N2:0.78084"  # CFR dry air, REFERENCES 1.2
    gas.TP = 300.0, ct.one_atm
    gas.set_equivalence_ratio(1.0 / lam, species, air)
    gas.TP = temperature, ct.one_atm
    gas.equilibrate("TP")
    ref_lambda = 1.0 / gas.equivalence_ratio(species, air)
    x = gas.mole_fraction_dict()
    h2o = x.get("H2O", 0.0)

    def dry(name):
        return x.get(name, 0.0) / (1.0 - h2o)

    return ref_lambda, dry, h2o


@pytest.mark.parametrize(("preset", "species"), [("methane", "CH4"), ("propane", "C3H8")])
@pytest.mark.parametrize("lam", [0.85, 0.9, 1.0, 1.1, 1.3, 1.5, 1.8])
def test_lambda_carbon_and_oxygen_against_cantera_equilibrium(preset, species, lam):
    # Reference: Cantera 3.x (gri30) equilibrium exhaust at 1700 K, composition frozen and
    # read dry (cooled major species); reference lambda = 1 / Cantera's element-based
    # equivalence ratio. 1700 K is about where the water-gas ratio of equilibrium exhaust is
    # the 3.5 that both methods assume (Cantera gives 3.41 there). Tolerance 0.5 %.
    fuel = load_presets()[preset]
    ref, dry, h2o = _cantera_exhaust(species, lam, 1700.0)
    r = chemical_balance(
        fuel, [dry("CO2")], [dry("CO")], [dry("CH4")], [dry("NO")], [dry("NO2")],
        x_h2o_int=0.0, basis={"thc": "dry"},
    )
    assert r.lambda_[0] == pytest.approx(ref, rel=5e-3)
    assert r.x_h2o_exh[0] == pytest.approx(h2o, rel=1e-2)
    lam_o = lambda_brettschneider(
        fuel, dry("CO2"), dry("O2"), dry("CO"), dry("CH4"), dry("NO"),
        intake_co2_dry=375e-6, h2_dry=r.x_h2_dry[0],
    )
    assert lam_o == pytest.approx(ref, rel=5e-3)


def test_lambda_from_flows_definition_and_guards():
    # Definition: lambda = (air/fuel)/AFR_st; AFR_st of #2 diesel 14.50 (REFERENCES 5 [D]).
    f = load_presets()["diesel_2"]
    lam = lambda_from_flows(np.array([290.1, 100.0, 100.0]), np.array([10.0, 0.0, np.nan]), f)
    assert lam[0] == pytest.approx(290.1 / 10.0 / f.afr_stoich)
    assert f.afr_stoich == pytest.approx(14.50, abs=0.01)
    assert np.isnan(lam[1]) and np.isnan(lam[2])  # fuel cut and dropout: NaN, never inf


def test_hydrogen_lambda_from_exhaust_o2_against_cantera():
    # Hydrogen has no carbon: lambda comes from the O2 side alone. Reference: Cantera 3.x
    # (gri30) equilibrium of H2 in CFR dry air at 1000 K (complete combustion), lambda =
    # 1 / element-based equivalence ratio; dry O2 fed to our carbon-free oxygen balance.
    from pipeline.balance.oxygen import lambda_oxygen_carbon_free

    ct = pytest.importorskip("cantera")
    gas = ct.Solution("gri30.yaml")
    air = "O2:0.209445, CO2:0.000375, AR:0.00934, N2:0.78084"
    h2 = load_presets()["hydrogen"]
    for lam in (1.2, 2.0, 3.0):
        gas.TP = 300.0, ct.one_atm
        gas.set_equivalence_ratio(1.0 / lam, "H2", air)
        gas.TP = 1000.0, ct.one_atm
        gas.equilibrate("TP")
        x = gas.mole_fraction_dict()
        o2_dry = x["O2"] / (1 - x["H2O"])
        ref = 1.0 / gas.equivalence_ratio("H2", air)
        assert lambda_oxygen_carbon_free(h2, o2_dry) == pytest.approx(ref, rel=1e-3)
