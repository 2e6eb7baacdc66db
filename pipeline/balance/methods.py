"""Alternative published lambda / AFR methods, for comparison with lambda_carbon.

Selectable in the config (``[methods] extra_lambda = ["spindt", "iso16183"]``); each is
written as its own series and flagged where it is not valid for the fuel.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .. import constants as C
from ..fuels import Fuel

#: Methods that can be asked for in ``[methods] extra_lambda``.
EXTRA_METHODS = ("spindt", "iso16183")


def afr_spindt(
    fuel: Fuel, co2_dry: ArrayLike, o2_dry: ArrayLike, co_dry: ArrayLike = 0.0,
    thc_dry: ArrayLike = 0.0,
) -> NDArray[np.float64]:
    """Air/fuel mass ratio by Spindt (SAE 650507, 1965; REFERENCES 3, commonly quoted form [S])::

        AFR = F_B {11.492 F_C (1 + R/2 + Q)/(1 + R) + 120 (1 - F_C)/(3.5 + R)}
        Q = O2/CO2, R = CO/CO2, F_B = (CO2 + CO)/(CO2 + CO + HC_C1),
        F_C = 12.01/(12.01 + 1.008 y), y = fuel H/C

    Dry concentrations in one unit. Hydrocarbon fuels only: there is no fuel-oxygen term.
    """
    co2 = np.asarray(co2_dry, float)
    co = np.asarray(co_dry, float)
    o2 = np.asarray(o2_dry, float)
    hc = np.asarray(thc_dry, float)
    f_c = 12.01 / (12.01 + 1.008 * fuel.h_c)
    with np.errstate(divide="ignore", invalid="ignore"):
        q = o2 / co2
        r = co / co2
        f_b = (co2 + co) / (co2 + co + hc)
        afr = f_b * (11.492 * f_c * (1 + r / 2 + q) / (1 + r) + 120 * (1 - f_c) / (3.5 + r))
    return np.where(np.isfinite(afr) & (afr > 0), afr, np.nan)


def lambda_spindt(fuel: Fuel, co2_dry, o2_dry, co_dry=0.0, thc_dry=0.0) -> NDArray[np.float64]:
    """Spindt's AFR divided by the fuel's stoichiometric dry-air ratio. NaN for fuels with
    oxygen (O/C > 0), where the method does not apply (REFERENCES 3)."""
    if fuel.o_c > 0 or not fuel.has_carbon:
        return np.full(np.broadcast(np.asarray(co2_dry)).shape, np.nan)
    return afr_spindt(fuel, co2_dry, o2_dry, co_dry, thc_dry) / fuel.afr_stoich


def lambda_iso16183(
    fuel: Fuel, co2_dry: ArrayLike, co_dry: ArrayLike = 0.0, thc_wet: ArrayLike = 0.0,
    *, k_water_gas: float = C.K_WATER_GAS,
) -> NDArray[np.float64]:
    """Excess-air ratio from raw exhaust, ISO 16183 / UN R49 form (REFERENCES 4.3, [C])::

        lambda = {100 - c_CO/2 - c_HC + [(a/4)(1 - 2 c_CO/(3.5 c_CO2))/(1 + c_CO/(3.5 c_CO2))
                  - e/2 - d/2] (c_CO2 + c_CO)}
                 / {4.764 (1 + a/4 - e/2 + g)(c_CO2 + c_CO + c_HC)}

    with every concentration in % (CO2 and CO dry, HC wet, C1); a = H/C, e = O/C, d = N/C,
    g = S/C. Inputs here are in mol/mol and converted. No O2 reading is needed.
    """
    c_co2 = np.asarray(co2_dry, float) * 100.0
    c_co = np.asarray(co_dry, float) * 100.0
    c_hc = np.asarray(thc_wet, float) * 100.0
    a, e, d, g = fuel.h_c, fuel.o_c, fuel.n_c, fuel.s_c
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = c_co / (k_water_gas * c_co2)
        hydrogen = (a / 4) * (1 - 2 * ratio) / (1 + ratio) - e / 2 - d / 2
        num = 100 - c_co / 2 - c_hc + hydrogen * (c_co2 + c_co)
        den = 4.764 * (1 + a / 4 - e / 2 + g) * (c_co2 + c_co + c_hc)
        lam = num / den
    return np.where(np.isfinite(lam) & (lam > 0), lam, np.nan)
