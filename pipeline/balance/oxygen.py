"""Lambda from the oxygen balance of the exhaust: the Brettschneider equation.

J. Brettschneider, "Berechnung des Luftverhaeltnisses lambda von Luft-Kraftstoff-Gemischen
und des Einflusses von Messfehlern auf lambda", Bosch Technische Berichte 6 (1979) 177-186
(REFERENCES 2; the paper was not reachable: its commonly quoted form [S], checked by derivation and
against the synthetic test vectors of REFERENCES 8).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .. import constants as C
from ..fuels import Fuel


def lambda_brettschneider(
    fuel: Fuel,
    co2_dry: ArrayLike,
    o2_dry: ArrayLike,
    co_dry: ArrayLike = 0.0,
    thc_dry: ArrayLike = 0.0,
    no_dry: ArrayLike = 0.0,
    *,
    intake_co2_dry: float = 0.0,
    h2_dry: ArrayLike = 0.0,
    k_water_gas: float = C.K_WATER_GAS,
) -> NDArray[np.float64]:
    """Excess-air ratio by the Brettschneider equation.

    All concentrations on a dry basis in one consistent unit (the equation is homogeneous, so
    mol/mol works as well as % vol); THC on a C1 basis (the carbon-count factor K1 is applied
    when THC is converted to C1 at ingest: ppm propane x 3, ppm hexane x 6)::

        lambda = { [CO2] + [CO]/2 + [O2] + [NO]/2
                   + ((H/4) 3.5/(3.5 + [CO]/[CO2]) - O/2) ([CO2] + [CO]) }
                 / { (1 + H/4 - O/2) ([CO2] + [CO] + [HC]) }

    H = fuel H/C, O = fuel O/C. Sulfur is not part of the published form. Where CO2 is zero
    or the denominator vanishes the result is NaN.

    ``intake_co2_dry`` (default 0: the published form) removes the CO2 that the intake air
    brought in, which the published form counts as fuel carbon (REFERENCES 2 notes this as
    its main residual; about -0.4 % at lambda 2 and -1 % at lambda 4 with 375 umol/mol).
    Our correction [D]: the dry air per mole dry exhaust is estimated from the inert share,
    (1 - CO2 - CO - O2 - H2 - NO - HC) / (1 - 0.209820) (N2 + Ar of dry air, REFERENCES
    1.2), and ``intake_co2_dry`` times that is subtracted from [CO2]. It uses no carbon
    balance result, so lambda_oxygen stays independent of it. ``h2_dry`` only enters that
    inert share (pass the water-gas estimate or a measurement; 0 is fine on the lean side).
    """
    co2 = np.asarray(co2_dry, dtype=float)
    co = np.asarray(co_dry, dtype=float)
    o2 = np.asarray(o2_dry, dtype=float)
    hc = np.asarray(thc_dry, dtype=float)
    no = np.asarray(no_dry, dtype=float)
    if intake_co2_dry:
        inert = 1.0 - (co2 + co + o2 + np.asarray(h2_dry, dtype=float) + no + hc)
        co2 = co2 - intake_co2_dry * inert / (1.0 - C.X_O2_PLUS_CO2_AIR_DRY)
    h, o = fuel.h_c, fuel.o_c
    with np.errstate(divide="ignore", invalid="ignore"):
        water_share = k_water_gas / (k_water_gas + co / co2)
        num = co2 + co / 2 + o2 + no / 2 + ((h / 4) * water_share - o / 2) * (co2 + co)
        den = (1 + h / 4 - o / 2) * (co2 + co + hc)
        lam = num / den
    return np.where(np.isfinite(lam) & (den > 0), lam, np.nan)


def lambda_oxygen_carbon_free(
    fuel: Fuel, o2_dry: ArrayLike, *, intake_co2_dry: float = C.X_CO2_AIR_DRY
) -> NDArray[np.float64]:
    """Excess-air ratio of a fuel without carbon (hydrogen, ammonia) from dry exhaust O2.

    Our derivation [D], by the same oxygen bookkeeping as Brettschneider's: per formula unit
    the fuel needs s = h/4 - o/2 + s_S mol O2 and releases n/2 mol N2; with dry air of O2
    fraction x_a = 0.209820 - x_CO2 (REFERENCES 1.2) supplied at lambda s / x_a mol, the dry
    exhaust holds y = (lambda - 1) s / (lambda s / x_a - s + n/2) of O2, hence::

        lambda = (s - y (s - n/2)) / (s (1 - y / x_a))

    (pure H2: lambda = (1 - y) / (1 - y / x_a)). Complete combustion assumed (no H2 slip,
    no NH3 slip, NOx neglected).
    """
    y = np.asarray(o2_dry, dtype=float)
    s_o2 = fuel.o2_stoich_per_c
    x_a = C.X_O2_PLUS_CO2_AIR_DRY - intake_co2_dry
    with np.errstate(divide="ignore", invalid="ignore"):
        lam = (s_o2 - y * (s_o2 - fuel.n_c / 2.0)) / (s_o2 * (1.0 - y / x_a))
    return np.where(np.isfinite(lam) & (lam > 0) & (y >= 0) & (y < x_a), lam, np.nan)
