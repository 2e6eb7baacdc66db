"""Figure "steady_points": the steady-point table as an image for the test report (one page).

One row per steady point (numbered as in the overview): start (clock time), duration,
operating point (speed, torque, brake power, fuel flow), the lambda estimates, the residuals
against ``lambda_flow`` in percent, the 40 CFR 1065.643 carbon-balance error and a verdict
(``ok``, the fault flags overlapping the point, or ``beyond +-tol``). Values are means over
steady, valid samples (:func:`pipeline.report.reportdata.steady_point_stats`). The image
holds the first :data:`ROWS_PER_PAGE` points; every point is in the CSV and Excel tables of
:mod:`.point_table` (a picture of a 300-row table is neither readable nor fast).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.collections import PolyCollection
from matplotlib.patches import Rectangle

from ..records import ProcessResult
from ..result import ResultFile, as_result
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

#: Fill of the header row, colour of the cell borders, font size [pt] of the cells.
HEADER_FILL = "#e6e6e6"
EDGE = "#bbbbbb"
FONT = 7.2


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


#: Table geometry, as in :class:`matplotlib.table.Table` (which this module drew with
#: before): gap above the table [axes fraction], text inset [fraction of the cell width] for
#: right-aligned and for left-aligned (verdict) cells, header height [rows].
AXES_PAD = 0.02
CELL_PAD = 0.1
VERDICT_PAD = 0.03
HEADER_ROWS = 1.6


def _draw_table(
    ax: Axes,
    header: list[str],
    text: list[list[str]],
    widths: np.ndarray,
    row_fill: list[str],
    bold: np.ndarray,
    left: np.ndarray,
) -> None:
    """The grid of cells on ``ax`` (axes coordinates, top-aligned, full width): header row in
    bold on grey, body cells filled with ``row_fill`` per row, text right-aligned (``left``
    columns left-aligned), ``bold`` cells in bold.

    One collection for all cells and plain texts, instead of a matplotlib Table whose every
    cell is re-measured on each layout and draw pass (the same picture, several times
    faster).
    """
    n_rows = len(text) + 1
    row_h = 1.0 / (n_rows + 0.6)
    heights = [row_h * HEADER_ROWS] + [row_h] * (n_rows - 1)
    lefts = np.r_[0.0, np.cumsum(widths)[:-1]]
    bottoms = np.empty(n_rows)
    ypos = 0.0
    for r in range(n_rows - 1, -1, -1):  # the last row sits at the bottom
        bottoms[r] = ypos
        ypos += heights[r]
    ox = 0.5 - float(widths.sum()) / 2.0
    oy = 1.0 - (ypos + AXES_PAD)
    x0 = lefts + ox
    x1 = x0 + widths
    y0 = bottoms + oy
    y1 = y0 + np.asarray(heights)
    rects = [
        [(a, b), (c, b), (c, d), (a, d)]
        for b, d in zip(y0, y1, strict=True)
        for a, c in zip(x0, x1, strict=True)
    ]
    fills = [HEADER_FILL] * len(widths) + [f for f in row_fill for _ in widths]
    ax.add_collection(
        PolyCollection(rects, facecolors=fills, edgecolors=EDGE, linewidths=0.4,
                       transform=ax.transAxes, clip_on=False, in_layout=False),
        autolim=False,
    )
    # the table's extent, for the layout (the cells themselves are kept out of it)
    ax.add_patch(Rectangle((x0[0], y0[-1]), x1[-1] - x0[0], y1[0] - y0[-1], fill=False,
                           edgecolor="none", linewidth=0, transform=ax.transAxes,
                           clip_on=False))
    mid = 0.5 * (y0 + y1)
    for c, label in enumerate(header):
        ax.text(0.5 * (x0[c] + x1[c]), mid[0], label, transform=ax.transAxes, fontsize=FONT,
                weight="bold", ha="center", va="center", clip_on=False, in_layout=False)
    x_right = x0 + widths * (1.0 - CELL_PAD)
    x_left = x0 + widths * VERDICT_PAD
    for r, row in enumerate(text, start=1):
        for c, value in enumerate(row):
            ax.text(x_left[c] if left[c] else x_right[c], mid[r], value,
                    transform=ax.transAxes, fontsize=FONT,
                    weight="bold" if bold[r - 1, c] else "normal",
                    ha="left" if left[c] else "right", va="center", clip_on=False,
                    in_layout=False)


def plot_steady_table(res: ResultFile | ProcessResult, out_png: Path) -> list[Path]:
    """Write the table image(s); returns every path written (``out_png``, then ``_2`` ...).
    ``res``: a read result file or an in-memory result of :func:`pipeline.process_run`."""
    res = as_result(res)
    pts = table_data(res)
    total = len(pts)
    pts = pts.iloc[:ROWS_PER_PAGE]  # one page: the CSV/XLSX tables hold every point
    cols = [c for c in COLUMNS if c[1] in pts and (c[1] == "verdict" or pts[c[1]].notna().any())]
    tol, tol_s, _ = rd.tolerance(res)
    pages = int(np.ceil(len(pts) / ROWS_PER_PAGE))
    out_png = Path(out_png)
    written = []
    widths = np.array([c[4] for c in cols])
    widths = widths / widths.sum()
    left = np.array([c[1] == "verdict" for c in cols])
    start_label = "start\nUTC" if res.start_time is not None else "start\nh"
    header = [start_label if c[1] == "start_s" else c[0] for c in cols]
    caption = (
        "means over steady, valid samples; residuals and carbon-balance error in %; "
        f"tolerance \u00b1{100 * tol:g} % (sensor \u00b1{100 * tol_s:g} %), bold = beyond"
    )
    if total > ROWS_PER_PAGE:
        caption = (f"first {ROWS_PER_PAGE} of {total} points (all in _steady_points.csv); "
                   + caption)
    for page in range(pages):
        part = pts.iloc[page * ROWS_PER_PAGE : (page + 1) * ROWS_PER_PAGE]
        path = out_png if page == 0 else out_png.with_name(f"{out_png.stem}_{page + 1}.png")
        title = "Steady points" + (f" (part {page + 1} of {pages})" if pages > 1 else "")
        text = [
            [_cell(res, v, c[2], c[3]) for v, c in zip(row, cols, strict=True)]
            for row in part[[c[1] for c in cols]].itertuples(index=False)
        ]
        row_fill = [FLAGGED_FILL if v != "ok" else "w" for v in part["verdict"]]
        bold = np.zeros((len(part), len(cols)), dtype=bool)
        for j, c in enumerate(cols):
            if c[1] in TOLERANCE_COLUMNS:
                lim = tol_s if "sensor" in c[1] else tol
                v = part[c[1]].to_numpy(dtype=np.float64)
                bold[:, j] = np.isfinite(v) & (np.abs(v) > lim)
        height = 1.35 + 0.21 * (len(part) + 2)
        with report_figure(res, title, height, caption) as body:
            ax = body.add_subplot()
            ax.axis("off")
            _draw_table(ax, header, text, widths, row_fill, bold, left)
            written.append(save(body, path))
    return written


def figure(res: ResultFile, out_dir: Path, stem: str) -> list[Path]:
    """Render this figure for the report (raises FigureSkipped when it cannot be made)."""
    return plot_steady_table(res, Path(out_dir) / f"{stem}_{NAME}.png")
