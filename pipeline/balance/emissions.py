"""Exhaust flow, wet concentrations, emission rates and brake-specific figures.

Sources
-------
- Exhaust molar flow from intake air or from fuel: 40 CFR 1065.655(f) (REFERENCES 1.5, [C];
  the intake-air form reproduces the 1065.656 example inputs to 6.066 mol/s).
- Removed-water (dry -> wet) correction: 40 CFR 1065.659, x = x_dry (1 - x_H2Oexh)
  (REFERENCES 1.7, [M]: section text not reachable; checked by closure).
- Emission mass rate m = M x_wet n_exh (40 CFR 1065.650, REFERENCES 1.11, [M] for the form);
  NOx always as NO2 (46.0055 g/mol, 1065.656(c)(1)); THC on a C1 basis with the fuel's H/C.
- Brake power P = 2 pi n T (1065.650, REFERENCES 1.11); brake-specific e = m / W.
- Carbon-balance error quantities: 40 CFR 1065.643 (REFERENCES 1.9, [V-ex]).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .. import constants as C
from ..fuels import Fuel
from .chemical import ChemicalBalance

Array = NDArray[np.float64]

#: kg/h -> g/s
KG_H_TO_G_S = 1000.0 / 3600.0


def thc_molar_mass(fuel: Fuel) -> float:
    """Molar mass of THC on a C1 basis with the fuel's H/C, M_C + alpha M_H, g/mol.

    40 CFR 1065 uses CH1.85 (13.875389 g/mol) by default (1065.643(c)); with the fuel's own
    H/C the THC mass follows the fuel actually burned.
    """
    return C.M_C + fuel.h_c * C.M_H


def intake_molar_flow(
    air_kg_h: ArrayLike, x_h2o_int: ArrayLike, *, basis: str = "wet"
) -> Array:
    """Wet intake-air molar flow, mol/s, from the air meter's mass flow.

    A wet (humid-air) reading is divided by the molar mass of the humid air,
    (1 - x) M_air + x M_H2O; a dry-air reading by M_air and then scaled to wet by 1/(1 - x).
    """
    air = np.asarray(air_kg_h, dtype=float) * KG_H_TO_G_S
    x = np.asarray(x_h2o_int, dtype=float)
    if basis == "wet":
        return air / ((1.0 - x) * C.M_AIR + x * C.M_H2O)
    return air / C.M_AIR / (1.0 - x)


def exhaust_molar_flow_from_intake(n_int_mol_s: ArrayLike, chem: ChemicalBalance) -> Array:
    """Raw-exhaust molar flow from the wet intake flow (40 CFR 1065.655(f), REFERENCES 1.5)::

        n_exh = n_int / [1 + (x_int/exhdry - x_raw/exhdry) / (1 + x_H2Oexhdry)]
    """
    n_int = np.asarray(n_int_mol_s, dtype=float)
    return n_int / (1.0 + (chem.x_int_exhdry - chem.x_raw_exhdry) / (1.0 + chem.x_h2o_exhdry))


def exhaust_molar_flow_from_fuel(
    fuel_kg_h: ArrayLike, fuel: Fuel, chem: ChemicalBalance
) -> Array:
    """Raw-exhaust molar flow from the fuel mass flow (40 CFR 1065.655(f), REFERENCES 1.5)::

        n_exh = m_fuel w_C (1 + x_H2Oexhdry) / (M_C x_Ccombdry)

    Valid for steady lab operation (the cross-check of the intake-air form).
    """
    m = np.asarray(fuel_kg_h, dtype=float) * KG_H_TO_G_S
    with np.errstate(divide="ignore", invalid="ignore"):
        return m * fuel.w_c * (1.0 + chem.x_h2o_exhdry) / (C.M_C * chem.x_ccombdry)


def wet_fractions(chem: ChemicalBalance) -> dict[str, Array]:
    """Every analyzer reading on the wet exhaust basis, x = x_dry (1 - x_H2Oexh).

    40 CFR 1065.659 removed-water correction (REFERENCES 1.7: x = x_meas (1 - x_H2Oexh) /
    (1 - x_H2Omeas)); the dry values of the chemical balance already divide by
    (1 - x_H2Omeas). NOx is NO + NO2.
    """
    factor = 1.0 - chem.x_h2o_exh
    out = {name: x * factor for name, x in chem.dry.items()}
    out["nox"] = (chem.dry["no"] + chem.dry["no2"]) * factor
    out["h2"] = chem.x_h2_dry * factor
    return out


def emission_rates(
    wet: Mapping[str, Array], n_exh_mol_s: ArrayLike, fuel: Fuel
) -> dict[str, Array]:
    """Emission mass rates in g/h: m = M x_wet n_exh (40 CFR 1065.650 continuous raw form).

    ``co2_mass_flow`` is the CO2 leaving the tailpipe (intake CO2 included, as measured);
    ``nox_mass_flow`` as NO2 (46.0055 g/mol); ``thc_mass_flow`` on a C1 basis with the
    fuel's H/C (:func:`thc_molar_mass`).
    """
    n = np.asarray(n_exh_mol_s, dtype=float) * 3600.0  # mol/h
    return {
        "co2_mass_flow": C.M_CO2 * wet["co2"] * n,
        "co_mass_flow": C.M_CO * wet["co"] * n,
        "nox_mass_flow": C.M_NO2 * wet["nox"] * n,
        "thc_mass_flow": thc_molar_mass(fuel) * wet["thc"] * n,
    }


def water_and_co2_per_kg_fuel(chem: ChemicalBalance, fuel: Fuel) -> dict[str, Array]:
    """Per kg of fuel burned, from the chemical balance alone (no flow meter involved).

    Per mole of dry exhaust the fuel brought x_Ccombdry mol of carbon, i.e. x_Ccombdry D g of
    fuel (D = molar mass per carbon, 1065.656(d)). Then, in kg per kg fuel:

    - ``combustion_water_per_kg_fuel``: water formed from fuel hydrogen,
      ((alpha/2)(x_Ccombdry - x_THC) - x_H2) M_H2O / (x_Ccombdry D) (Eq. 1065.655-5 without
      the intake-air terms);
    - ``exhaust_water_per_kg_fuel``: all exhaust water, x_H2Oexhdry M_H2O / (x_Ccombdry D);
    - ``co2_per_kg_fuel``: CO2 formed from fuel carbon, (x_CO2dry - intake CO2 share)
      M_CO2 / (x_Ccombdry D).

    Complete combustion gives 44.0095 w_C / 12.0107 kg CO2 per kg (3.18 for #2 diesel).
    """
    d = fuel.molar_mass_per_c
    with np.errstate(divide="ignore", invalid="ignore"):
        fuel_g = chem.x_ccombdry * d
        combustion_water = (
            (fuel.h_c / 2.0) * (chem.x_ccombdry - chem.dry["thc"]) - chem.x_h2_dry
        ) * C.M_H2O
        intake_co2 = chem.x_co2_int * (chem.x_int_exhdry + chem.x_dil_exhdry)
        return {
            "combustion_water_per_kg_fuel": combustion_water / fuel_g,
            "exhaust_water_per_kg_fuel": chem.x_h2o_exhdry * C.M_H2O / fuel_g,
            "co2_per_kg_fuel": (chem.dry["co2"] - intake_co2) * C.M_CO2 / fuel_g,
        }


def brake_power_kw(speed_rpm: ArrayLike, torque_nm: ArrayLike) -> Array:
    """Brake power P = 2 pi n T, kW, with n in rev/s (40 CFR 1065.650, REFERENCES 1.11)."""
    return 2.0 * np.pi * np.asarray(speed_rpm, float) / 60.0 * np.asarray(torque_nm, float) / 1e3


def carbon_balance_error(
    m_c_fluid_g: float, m_c_air_g: float, m_c_exh_g: float, duration_h: float
) -> dict[str, float]:
    """40 CFR 1065.643 carbon-balance error quantities (REFERENCES 1.9, [V-ex]).

    eps_aC = m_Cexh - m_Cfluid - m_Cair (g); eps_aCrate = eps_aC / t (g/h);
    eps_rC = eps_aC / (m_Cfluid + m_Cair). 1065.643 example: m_Cexh 1247.2 g, m_Cfluid
    975.3 g, m_Cair 278.6 g -> eps_aC -6.7 g, eps_rC -0.0053.
    """
    eps_ac = m_c_exh_g - m_c_fluid_g - m_c_air_g
    denom = m_c_fluid_g + m_c_air_g
    return {
        "eps_aC_g": eps_ac,
        "eps_aCrate_g_per_h": eps_ac / duration_h if duration_h > 0 else float("nan"),
        "eps_rC": eps_ac / denom if denom > 0 else float("nan"),
    }


def carbon_mass_in_exhaust(m_co2_g: ArrayLike, m_co_g: ArrayLike, m_thc_g: ArrayLike,
                           m_thc_molar_mass: float) -> Array:
    """Carbon mass in the exhaust, m_Cexh = M_C (m_CO2/M_CO2 + m_CO/M_CO + m_THC/M_THC), g.

    40 CFR 1065.643(c) (REFERENCES 1.9): example 4567 g CO2, 0.803 g CO, 0.537 g THC
    (M_THC 13.875389) -> 1247.2 g.
    """
    return C.M_C * (
        np.asarray(m_co2_g, float) / C.M_CO2
        + np.asarray(m_co_g, float) / C.M_CO
        + np.asarray(m_thc_g, float) / m_thc_molar_mass
    )


def carbon_balance_error_rate(
    fuel_kg_h: ArrayLike,
    fuel_carbon_kg_h: ArrayLike,
    air_dry_kg_h: ArrayLike | None,
    w_c: float,
    x_co2_air: float = C.X_CO2_AIR_DRY,
) -> Array:
    """Relative carbon-balance error eps_rC of 40 CFR 1065.643, in rate form, as a fraction.

    eps_rC = (m_Cexh - m_Cfluid - m_Cair) / (m_Cfluid + m_Cair) (REFERENCES 1.9). The exhaust
    carbon is the fuel carbon implied by the exhaust (``fuel_mass_flow_carbon``, i.e. air flow
    and exhaust carbon) plus the intake-air carbon, so m_Cexh - m_Cfluid - m_Cair =
    w_C (m_fuel,carbon - m_fuel). Intake-air carbon m_Cair = n_air x_CO2,air M_C, with the dry
    air molar mass :data:`~pipeline.constants.M_AIR`; it is left out when ``air_dry_kg_h`` is
    None. All rates in kg/h; ``w_c`` is the fuel carbon mass fraction; NaN where the fuel flow
    and air carbon are both zero.
    """
    m_c_fuel = w_c * np.asarray(fuel_kg_h, dtype=np.float64)
    m_c_exh_fuel = w_c * np.asarray(fuel_carbon_kg_h, dtype=np.float64)
    if air_dry_kg_h is None:
        m_c_air = np.zeros_like(m_c_fuel)
    else:
        m_c_air = np.asarray(air_dry_kg_h, dtype=np.float64) / C.M_AIR * x_co2_air * C.M_C
    eps_ac = (m_c_exh_fuel + m_c_air) - m_c_fuel - m_c_air  # m_Cexh - m_Cfluid - m_Cair
    with np.errstate(invalid="ignore", divide="ignore"):
        return eps_ac / (m_c_fuel + m_c_air)
