"""The steady-point table as a table: CSV always, an Excel workbook when XlsxWriter is there.

One row per steady point, the columns of the report's table (:mod:`.steady_table`) with the
unit in each header (``speed [rpm]``); values are the means over steady, valid samples
(:func:`pipeline.report.reportdata.steady_point_stats`), residuals and the carbon-balance
error in percent. The figure shows at most one page of it; these files hold every point,
for pasting into a test report. No matplotlib is imported here.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..atomic import atomic_path
from ..result import ResultFile
from . import reportdata as rd

#: (source column, header, unit, scale) of the exported table, in order.
COLUMNS: list[tuple[str, str, str, float]] = [
    ("point", "point", "", 1.0),
    ("start_s", "start", "s since start", 1.0),
    ("end_s", "end", "s since start", 1.0),
    ("duration_min", "duration", "min", 1.0),
    ("speed", "speed", "rpm", 1.0),
    ("torque", "torque", "N.m", 1.0),
    ("brake_power", "brake power", "kW", 1.0),
    ("fuel_mass_flow", "fuel flow", "kg/h", 1.0),
    ("air_mass_flow", "air flow", "kg/h", 1.0),
    ("lambda_flow", "lambda flow", "1", 1.0),
    ("lambda_carbon", "lambda carbon", "1", 1.0),
    ("lambda_oxygen", "lambda oxygen", "1", 1.0),
    ("lambda_sensor", "lambda sensor", "1", 1.0),
    ("residual_carbon_flow", "carbon - flow", "%", 100.0),
    ("residual_oxygen_flow", "oxygen - flow", "%", 100.0),
    ("residual_sensor_flow", "sensor - flow", "%", 100.0),
    ("carbon_balance_error", "carbon-balance error", "%", 100.0),
    ("co2_mass_flow", "CO2", "g/h", 1.0),
    ("co_mass_flow", "CO", "g/h", 1.0),
    ("nox_mass_flow", "NOx as NO2", "g/h", 1.0),
    ("thc_mass_flow", "THC C1", "g/h", 1.0),
    ("exhaust_dewpoint", "exhaust dew point", "degC", 1.0),
    ("verdict", "verdict", "", 1.0),
]


def point_table(res: ResultFile) -> pd.DataFrame:
    """The table with unit-bearing headers; empty when the night has no steady point."""
    pts = rd.steady_point_stats(res)
    if not len(pts):
        return pd.DataFrame()
    pts["duration_min"] = (pts["end_s"] - pts["start_s"]) / 60.0
    tol, _, _ = rd.tolerance(res)
    pts["verdict"] = rd.point_verdicts(pts, res.flags, tol)
    out = {}
    for col, header, unit, scale in COLUMNS:
        if col not in pts or (col != "verdict" and not pts[col].notna().any()):
            continue
        name = f"{header} [{unit}]" if unit else header
        values = pts[col]
        out[name] = values if col in ("verdict", "point") else values.to_numpy(float) * scale
    if res.start_time is not None:
        start = pd.Timestamp(res.start_time)
        out["start [UTC]"] = [(start + pd.Timedelta(seconds=float(s))).strftime(
            "%Y-%m-%d %H:%M:%S") for s in pts["start_s"]]
    return pd.DataFrame(out)


def write_point_tables(res: ResultFile, out_dir: Path, stem: str) -> list[Path]:
    """``<stem>_steady_points.csv`` and, with XlsxWriter installed, ``.xlsx``; none when
    there is no steady point."""
    table = point_table(res)
    if not len(table):
        return []
    written = []
    csv_path = Path(out_dir) / f"{stem}_steady_points.csv"
    with atomic_path(csv_path) as tmp:
        table.to_csv(tmp, index=False, float_format="%.6g", encoding="utf-8")
    written.append(csv_path)
    try:
        import xlsxwriter  # noqa: F401
    except ImportError:
        return written
    xlsx_path = Path(out_dir) / f"{stem}_steady_points.xlsx"
    with atomic_path(xlsx_path) as tmp:
        with pd.ExcelWriter(tmp, engine="xlsxwriter") as xw:
            table.replace({np.nan: None}).to_excel(xw, sheet_name="steady points", index=False)
    written.append(xlsx_path)
    return written
