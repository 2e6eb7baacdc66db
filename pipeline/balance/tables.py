"""The ``/emissions/`` table: per steady point and for the whole night.

Masses are the time integrals of the rates over the valid samples of each interval
(40 CFR 1065.650 continuous form, REFERENCES 1.11); brake-specific values divide by the
brake work over the same samples; the carbon-balance error quantities are those of
40 CFR 1065.643 (REFERENCES 1.9), with intake-air carbon from the measured intake flow
(1065.643 option (1)).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from .. import constants as C
from ..config import Verification
from ..fuels import Fuel
from ..spans import sample_seconds
from .driftcor import validation
from .emissions import carbon_balance_error, carbon_mass_in_exhaust, thc_molar_mass

SPECIES = ("co2", "co", "nox", "thc")

#: Units of the table columns (written as the ``units`` attribute of each column dataset).
UNITS: dict[str, str] = {
    "start_s": "s", "end_s": "s", "duration_h": "h", "samples": "1",
    "speed": "rpm", "torque": "N.m", "brake_power": "kW", "fuel_mass_flow": "kg/h",
    "work_kWh": "kW.h", "fuel_g": "g", "bsfc_g_per_kWh": "g/(kW.h)",
    "co2_per_kg_fuel": "kg/kg",
    "m_c_fuel_g": "g", "m_c_air_g": "g", "m_c_exh_g": "g", "eps_aC_g": "g",
    "eps_aCrate_g_per_h": "g/h", "eps_rC": "1", "driftcor_coverage": "1",
}
for _sp in SPECIES:
    UNITS[f"{_sp}_g_h"] = "g/h"
    UNITS[f"{_sp}_g"] = "g"
    UNITS[f"{_sp}_g_per_kWh"] = "g/(kW.h)"
    UNITS[f"{_sp}_g_per_kWh_driftcor"] = "g/(kW.h)"
    UNITS[f"{_sp}_g_driftcor"] = "g"
    UNITS[f"{_sp}_driftcor_diff"] = "1"


def _row(
    label: str,
    s: pd.DataFrame,
    mask: np.ndarray,
    dt: np.ndarray,
    fuel: Fuel,
    verification: Verification,
    corrected: pd.DataFrame | None,
    span: slice = slice(None),
) -> dict[str, object]:
    """One table row over the samples ``mask`` of the rows ``span`` of ``s`` (``mask`` is
    given for the span only; the samples outside it carry no weight)."""
    w = dt[span] * mask
    hours = float(w.sum()) / 3600.0
    t = s["time"].to_numpy()[span]
    row: dict[str, object] = {
        "label": label,
        "start_s": float(t[mask][0]) if mask.any() else np.nan,
        "end_s": float(t[mask][-1]) if mask.any() else np.nan,
        "samples": int(mask.sum()),
        "duration_h": hours,
    }

    def integral(name: str, frame: pd.DataFrame = s) -> float:
        """Time integral over the row (unit of the rate x h)."""
        if name not in frame:
            return np.nan
        v = frame[name].to_numpy()[span]
        return float(np.nansum(v * w)) / 3600.0

    def mean(name: str) -> float:
        return integral(name) / hours if hours > 0 and name in s else np.nan

    for q in ("speed", "torque", "brake_power", "fuel_mass_flow"):
        row[q] = mean(q)
    work = integral("brake_power") if "brake_power" in s else np.nan
    row["work_kWh"] = work
    fuel_g = integral("fuel_mass_flow") * 1000.0
    row["fuel_g"] = fuel_g
    row["bsfc_g_per_kWh"] = fuel_g / work if work and work > 0 else np.nan
    row["co2_per_kg_fuel"] = mean("co2_per_kg_fuel")
    for sp in SPECIES:
        m = integral(f"{sp}_mass_flow")
        row[f"{sp}_g_h"] = m / hours if hours > 0 else np.nan
        row[f"{sp}_g"] = m
        row[f"{sp}_g_per_kWh"] = m / work if work and work > 0 else np.nan
    # 40 CFR 1065.643: carbon in (fuel, intake air) against carbon out (exhaust).
    if {"co2_mass_flow", "intake_molar_flow"} <= set(s.columns) and fuel.has_carbon:
        m_c_fuel = fuel.w_c * fuel_g
        n_int_mol = integral("intake_molar_flow") * 3600.0
        x_co2_int = float(np.nanmean(s["intake_co2_fraction"].to_numpy()[span][mask])) if (
            "intake_co2_fraction" in s and mask.any()
        ) else C.X_CO2_AIR_DRY
        m_c_air = C.M_C * n_int_mol * x_co2_int
        m_c_exh = float(
            carbon_mass_in_exhaust(row["co2_g"], np.nan_to_num(row["co_g"]),
                                   np.nan_to_num(row["thc_g"]), thc_molar_mass(fuel))
        )
        err = carbon_balance_error(m_c_fuel, m_c_air, m_c_exh, hours)
        row.update({"m_c_fuel_g": m_c_fuel, "m_c_air_g": m_c_air, "m_c_exh_g": m_c_exh, **err})
        limits = [
            (abs(err["eps_rC"]), verification.eps_rC_max),
            (abs(err["eps_aC_g"]), verification.eps_aC_max_g),
            (abs(err["eps_aCrate_g_per_h"]), verification.eps_aCrate_max_g_per_h),
        ]
        judged = [(v, lim) for v, lim in limits if lim is not None]
        if not judged:
            row["carbon_balance_verdict"] = "no limit configured"
        else:
            ok = all(np.isfinite(v) and v <= lim for v, lim in judged)
            row["carbon_balance_verdict"] = "pass" if ok else "fail"
    if corrected is not None:
        verdicts = []
        coverage = []
        for sp in SPECIES:
            name = f"{sp}_mass_flow"
            if name not in corrected or name not in s:
                continue
            # Compare over the samples the correction covers (those with pre and post
            # zero/span readings), the same samples on both sides.
            cov = np.isfinite(corrected[name].to_numpy()[span])
            w_c = w * cov
            coverage.append(float(w_c.sum() / w.sum()) if w.sum() > 0 else 0.0)
            m_unc = float(np.nansum(s[name].to_numpy()[span] * w_c)) / 3600.0
            m_cor = float(np.nansum(corrected[name].to_numpy()[span] * w_c)) / 3600.0
            work_c = (
                float(np.nansum(s["brake_power"].to_numpy()[span] * w_c)) / 3600.0
                if "brake_power" in s else np.nan
            )
            row[f"{sp}_g_driftcor"] = m_cor if w_c.sum() > 0 else np.nan
            has_work = np.isfinite(work_c) and work_c > 0
            row[f"{sp}_g_per_kWh_driftcor"] = m_cor / work_c if has_work else np.nan
            # 1065.550: compare brake-specific results; without brake work, the masses.
            unc, cor = (m_unc / work_c, m_cor / work_c) if has_work else (m_unc, m_cor)
            diff = validation(unc, cor)[0] if w_c.sum() > 0 else np.nan
            row[f"{sp}_driftcor_diff"] = diff
            if np.isfinite(diff):
                verdicts.append(abs(diff) <= verification.drift_validation_limit)
        row["driftcor_coverage"] = min(coverage) if coverage else 0.0
        row["drift_validation"] = (
            "n/a" if not verdicts else ("pass" if all(verdicts) else "fail")
        )
    return row


#: Brake-specific results (g/kWh) are left out (NaN) for a steady point whose mean brake
#: power is below this fraction of the highest point's: at idle the work is near zero and the
#: ratio grows without meaning [1] (common practice: maps report BSFC from a few % load up).
BS_MIN_POWER_FRACTION = 0.03


def _no_brake_specific_near_zero_power(table: pd.DataFrame) -> None:
    """NaN for the brake-specific columns of points near zero power (in place)."""
    if "brake_power" not in table or len(table) < 2:
        return
    power = table["brake_power"].to_numpy(dtype=float)
    points = table["label"].to_numpy() != "night"
    top = np.nanmax(np.where(points, power, np.nan), initial=0.0) if points.any() else 0.0
    with np.errstate(invalid="ignore"):
        low = points & ~(power >= BS_MIN_POWER_FRACTION * top)
    if not low.any():
        return
    for col in table.columns:
        if col == "bsfc_g_per_kWh" or "_g_per_kWh" in col:
            table.loc[low, col] = np.nan


def emissions_table(
    series: pd.DataFrame,
    intervals: Sequence[tuple[str, float, float]],
    fuel: Fuel,
    verification: Verification,
    corrected: pd.DataFrame | None = None,
) -> pd.DataFrame:
    """One row per (label, start_s, end_s) interval plus a ``night`` row over all samples.

    Only samples with ``valid`` = 1 count. ``corrected`` holds drift-corrected emission rates
    on the same rows (40 CFR 1065.672); then every row also gets the corrected masses and
    brake-specific results and the 1065.550 verdict (``drift_validation``).
    """
    t = series["time"].to_numpy()
    valid = series["valid"].to_numpy() > 0 if "valid" in series else np.ones(t.size, bool)
    dt = sample_seconds(t)
    rows = []
    # Each interval's sums run over its own rows only, so the table costs O(rows) and not
    # O(rows x intervals) (a 120 h log has hundreds of steady points). With a time column
    # that never decreases, the rows of [start, end] are found by bisection.
    ordered = t.size < 2 or bool(np.all(np.diff(t) >= 0))
    for label, start, end in intervals:
        if ordered:
            span = slice(int(np.searchsorted(t, start, "left")),
                         int(np.searchsorted(t, end, "right")))
            tt = t[span]
            mask = valid[span] & (tt >= start) & (tt <= end)
        else:
            span = slice(None)
            mask = valid & (t >= start) & (t <= end)
        rows.append(_row(label, series, mask, dt, fuel, verification, corrected, span))
    rows.append(_row("night", series, valid, dt, fuel, verification, corrected))
    table = pd.DataFrame(rows)
    _no_brake_specific_near_zero_power(table)
    table.attrs["units"] = {c: UNITS[c] for c in table.columns if c in UNITS}
    return table
