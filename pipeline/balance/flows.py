"""Lambda from the measured intake-air and fuel mass flows."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..fuels import Fuel

#: Above this, lambda_flow is taken as undefined (fuel cut, motoring, meter dropout): a
#: running engine does not burn leaner than this (common practice; idle diesels run 5-10).
LAMBDA_FLOW_MAX = 30.0


def lambda_from_flows(
    air_dry_kg_h: ArrayLike, fuel_kg_h: ArrayLike, fuel: Fuel
) -> NDArray[np.float64]:
    """lambda = (m_air,dry / m_fuel) / AFR_st (REFERENCES 1.6 and 5).

    AFR_st is the stoichiometric dry-air/fuel mass ratio computed from the fuel composition
    (:attr:`pipeline.fuels.Fuel.afr_stoich`), so the air must be dry air too. Non-positive
    fuel flow or a result above :data:`LAMBDA_FLOW_MAX` gives NaN, never inf.
    """
    air = np.asarray(air_dry_kg_h, dtype=float)
    fuel_flow = np.asarray(fuel_kg_h, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        lam = air / fuel_flow / fuel.afr_stoich
    ok = (fuel_flow > 0) & np.isfinite(lam) & (lam > 0) & (lam <= LAMBDA_FLOW_MAX)
    return np.where(ok, lam, np.nan)
