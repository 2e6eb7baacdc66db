"""Pairwise relative residuals of the lambda estimates, and the carbon-balance fuel flow.

``residual_<a>_<b> = lambda_<a> / lambda_<b> - 1`` (dimensionless). For small faults it is
close to the difference of the relative errors of the two estimates, which is what the
attribution uses (DESIGN.md "Lambda estimates").
"""

from __future__ import annotations

import numpy as np

from ..instruments import ESTIMATE_COLUMNS, RESIDUAL_PAIRS

__all__ = ["ESTIMATE_COLUMNS", "RESIDUAL_PAIRS", "carbon_fuel_flow", "compute_residuals",
           "relative_residual"]

def relative_residual(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``a / b - 1``; NaN where either is missing or ``b`` is not positive."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.where(b > 0, a / b - 1.0, np.nan)
    r[~np.isfinite(r)] = np.nan
    return r


def carbon_fuel_flow(
    fuel_mass_flow: np.ndarray, lambda_flow: np.ndarray, lambda_carbon: np.ndarray
) -> np.ndarray:
    """Fuel flow implied by the air flow and exhaust carbon [kg/h].

    The carbon-balance fuel flow is m_air / (lambda_carbon * AFR_st); since
    lambda_flow = m_air / (m_fuel * AFR_st), it equals m_fuel * lambda_flow / lambda_carbon,
    which needs no stoichiometric ratio [D] (algebra on the definitions in DESIGN.md).
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.asarray(fuel_mass_flow, float) * np.asarray(lambda_flow, float)
        out = np.where(
            np.asarray(lambda_carbon, float) > 0, f / np.asarray(lambda_carbon, float), np.nan
        )
    out[~np.isfinite(out)] = np.nan
    return out


def compute_residuals(estimates: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Every residual of :data:`RESIDUAL_PAIRS` whose two estimates are present."""
    out: dict[str, np.ndarray] = {}
    for name, (a, b) in RESIDUAL_PAIRS.items():
        if a in estimates and b in estimates:
            out[name] = relative_residual(estimates[a], estimates[b])
    return out
