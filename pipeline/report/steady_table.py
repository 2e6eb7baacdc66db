"""Figure "steady_points": the steady-point table as an image for the test report.

One row per steady point (numbered as in the overview): start (clock time), duration,
operating point (speed, torque, brake power, fuel flow), the lambda estimates, the residuals
against ``lambda_flow`` in percent, the 40 CFR 1065.643 carbon-balance error and a verdict
(``ok``, the fault flags overlapping the point, or ``beyond +-tol``). Values are means over
steady, valid samples (:func:`pipeline.report.reportdata.steady_point_stats`). Long nights
are split over several images of at most :data:`ROWS_PER_PAGE` rows.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..result import ResultFile
from . import reportdata as rd
from .plots import FigureSkipped, report_figure, save

#: File name part of this figure.
NAME = "steady_points"

#: Most table rows per image.
ROWS_PER_PAGE = 30

#: Table columns: (header, source column, format, scale, relative width).
COLUMNS: list[tuple[str, str, str, float, float]] = [
    ("#", "point", "{:.0f}", 1.0, 0.32),
    ("start", "start_s", "clock", 1.0, 0.72),
    ("min", "duration_min", "{:.0f}", 1.0, 0.42),
    ("speed\nrpm", "speed", "{:.0f}", 1.0, 0.65),
    ("torque\nN\u00b7m", "torque", "{:.0f}", 1.0, 0.65),
    ("power\nkW", "brake_power", "{:.1f}", 1.0, 0.6),
    ("fuel\nkg/h", "fuel_mass_flow", "{:.2f}", 1.0, 0.6),
    ("\u03bb\nflow", "lambda_flow", "{:.3f}", 1.0, 0.6),
    ("\u03bb\ncarbon", "lambda_carbon", "{:.3f}", 1.0, 0.62),
    ("\u03bb\noxygen", "lambda_oxygen", "{:.3f}", 1.0, 0.62),
    ("\u03bb\nsensor", "lambda_sensor", "{:.3f}", 1.0, 0.62),
    ("carbon\n\u2212flow %", "residual_carbon_flow", "{:+.2f}", 100.0, 0.72),
    ("oxygen\n\u2212flow %", "residual_oxygen_flow", "{:+.2f}", 100.0, 0.72),
    ("sensor\n\u2212flow %", "residual_sensor_flow", "{:+.2f}", 100.0, 0.72),
    ("C-bal.\nerror %", "carbon_balance_error", "{:+.2f}", 100.0, 0.65),
    ("verdict", "verdict", "{}", 1.0, 2.15),
]

#: Residual columns compared with the tolerance (bold when beyond).
TOLERANCE_COLUMNS = ("residual_carbon_flow", "residual_oxygen_flow", "residual_sensor_flow")

#: Fill of a row whose verdict is not ``ok`` (light vermillion; the verdict text says why).
FLAGGED_FILL = "#fbe3d6"


def table_data(res: ResultFile) -> pd.DataFrame:
    """The steady-point table: :func:`steady_point_stats` plus ``duration_min`` and
    ``verdict``. Raises :class:`FigureSkipped` when the result has no steady points."""
    pts = rd.steady_point_stats(res)
    if not len(pts):
        raise FigureSkipped("no steady points in the result")
    pts["duration_min"] = (pts["end_s"] - pts["start_s"]) / 60.0
    tol, tol_s, _ = rd.tolerance(res)
    pts["verdict"] = rd.point_verdicts(pts, res.flags, tol)
    return pts


def _cell(res: ResultFile, value: object, fmt: str, scale: float) -> str:
    if fmt == "clock":
        return rd.clock(res, float(value)).removesuffix(" UTC").removesuffix(" into the run")
    if isinstance(value, str):
        return value
    v = float(value) * scale
    return fmt.format(v) if np.isfinite(v) else "\u2013"


def plot_steady_table(res: ResultFile, out_png: Path) -> list[Path]:
    """Write the table image(s); returns every path written (``out_png``, then ``_2`` ...)."""
    pts = table_data(res)
    cols = [c for c in COLUMNS if c[1] in pts and (c[1] == "verdict" or pts[c[1]].notna().any())]
    tol, tol_s, _ = rd.tolerance(res)
    pages = int(np.ceil(len(pts) / ROWS_PER_PAGE))
    out_png = Path(out_png)
    written = []
    for page in range(pages):
        part = pts.iloc[page * ROWS_PER_PAGE : (page + 1) * ROWS_PER_PAGE]
        path = out_png if page == 0 else out_png.with_name(f"{out_png.stem}_{page + 1}.png")
        title = "Steady points" + (f" (part {page + 1} of {pages})" if pages > 1 else "")
        start_label = "start\nUTC" if res.start_time is not None else "start\nh"
        caption = (
            "means over steady, valid samples; residuals and carbon-balance error in %; "
            f"tolerance \u00b1{100 * tol:g} % (sensor \u00b1{100 * tol_s:g} %), bold = beyond"
        )
        height = 1.35 + 0.21 * (len(part) + 2)
        with report_figure(res, title, height, caption) as body:
            ax = body.add_subplot()
            ax.axis("off")
            text = [[_cell(res, row[c[1]], c[2], c[3]) for c in cols] for _, row in part.iterrows()]
            header = [start_label if c[1] == "start_s" else c[0] for c in cols]
            widths = np.array([c[4] for c in cols])
            table = ax.table(cellText=text, colLabels=header, colWidths=widths / widths.sum(),
                             loc="upper center", cellLoc="right")
            table.auto_set_font_size(False)
            table.set_fontsize(7.2)
            n_rows = len(part) + 1
            table.scale(1.0, 1.0)
            for (r, c), cell in table.get_celld().items():
                cell.set_edgecolor("#bbbbbb")
                cell.set_linewidth(0.4)
                cell.set_height(1.0 / (n_rows + 0.6) * (1.6 if r == 0 else 1.0))
                name = cols[c][1]
                if name == "verdict":
                    cell.set_text_props(ha="left")
                    cell.PAD = 0.03
                if r == 0:
                    cell.set_facecolor("#e6e6e6")
                    cell.set_text_props(weight="bold", ha="center")
                    continue
                row = part.iloc[r - 1]
                if row["verdict"] != "ok":
                    cell.set_facecolor(FLAGGED_FILL)
                if name in TOLERANCE_COLUMNS:
                    lim = tol_s if "sensor" in name else tol
                    if np.isfinite(row[name]) and abs(float(row[name])) > lim:
                        cell.set_text_props(weight="bold")
            written.append(save(body, path))
    return written


def figure(res: ResultFile, out_dir: Path, stem: str) -> list[Path]:
    """Render this figure for the report (raises FigureSkipped when it cannot be made)."""
    return plot_steady_table(res, Path(out_dir) / f"{stem}_{NAME}.png")
