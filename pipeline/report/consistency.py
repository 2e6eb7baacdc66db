"""Figure "consistency": exhaust lambdas against flow lambda on steady points, coloured by time.

Left: ``lambda_carbon`` (circles) and ``lambda_oxygen`` (triangles) against ``lambda_flow``
with the 1:1 line and the +-tolerance band. Right: the same as relative deviation from
``lambda_flow`` in percent, where the tolerance is a horizontal band and a drift shows as a
colour gradient (early points dark, late points light). Each marker is the mean of one
5-minute block inside a steady point (:func:`pipeline.report.reportdata.steady_blocks`), so a
12 h night at 10 Hz gives a few hundred markers, not 400 000.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ..records import ProcessResult
from ..result import ResultFile, as_result
from . import reportdata as rd
from .plots import TIME_CMAP, FigureSkipped, finish, night_x, report_figure, time_colorbar

#: File name part of this figure.
NAME = "consistency"

#: Marker per exhaust estimate (shape, not only colour, tells them apart).
MARKERS = {"lambda_carbon": "o", "lambda_oxygen": "^"}

#: Plain names of the estimates in the legend.
LABELS = {
    "lambda_carbon": "lambda_carbon (carbon balance)",
    "lambda_oxygen": "lambda_oxygen (oxygen balance)",
}


def consistency_data(res: ResultFile) -> tuple[pd.DataFrame, list[str], float]:
    """(steady blocks with ``dev_<estimate>`` in %, estimates present, tolerance fraction).

    ``dev_lambda_carbon = 100 (lambda_carbon / lambda_flow - 1)`` per block, likewise for
    oxygen. Raises :class:`FigureSkipped` without ``lambda_flow``, without an exhaust estimate
    or without steady points.
    """
    if rd.series(res, "lambda_flow") is None:
        raise FigureSkipped("no lambda_flow in the result (air or fuel flow not logged)")
    present = [n for n in MARKERS if rd.series(res, n) is not None]
    if not present:
        raise FigureSkipped("neither lambda_carbon nor lambda_oxygen in the result")
    blocks = rd.steady_blocks(res)
    blocks = blocks[np.isfinite(blocks["lambda_flow"])] if len(blocks) else blocks
    if not len(blocks):
        raise FigureSkipped("no steady point with valid lambda estimates")
    for n in present:
        blocks[f"dev_{n}"] = 100.0 * (blocks[n] / blocks["lambda_flow"] - 1.0)
    tol, _, _ = rd.tolerance(res)
    return blocks.reset_index(drop=True), present, tol


def plot_consistency(res: ResultFile | ProcessResult, out_png: Path | None = None) -> Figure:
    """Write the consistency figure (1600 x 800 px); see the module docstring.

    Returns the drawn :class:`~matplotlib.figure.Figure` (written as PNG to ``out_png`` when
    given); ``res`` is a read result file or an in-memory result of
    :func:`pipeline.process_run`.
    """
    res = as_result(res)
    blocks, present, tol = consistency_data(res)
    conv, _, _ = night_x(res)
    c = conv(blocks["t_s"].to_numpy(dtype=np.float64))
    t_all = conv(res.timeseries["time"].to_numpy(dtype=np.float64))
    norm = Normalize(float(np.nanmin(t_all)), float(np.nanmax(t_all)))
    with report_figure(
        res,
        "Lambda consistency on steady points",
        4.0,
        caption="each marker: mean of a 5-min block inside a steady point; "
        "colour: time of night (a drift shows as a colour gradient)",
    ) as body:
        ax1, ax2 = body.subplots(1, 2, gridspec_kw={"width_ratios": [1, 1.25]})
        x = blocks["lambda_flow"].to_numpy(dtype=np.float64)
        lo, hi = float(np.nanmin(x)), float(np.nanmax(x))
        pad = 0.06 * (hi - lo if hi > lo else 1.0)
        xx = np.array([lo - pad, hi + pad])
        ax1.fill_between(xx, xx * (1 - tol), xx * (1 + tol), color="#d9d9d9", alpha=0.7,
                         linewidth=0, zorder=0)
        ax1.plot(xx, xx, color="#333333", linewidth=0.8, zorder=1)
        ax2.axhspan(-100 * tol, 100 * tol, color="#d9d9d9", alpha=0.7, linewidth=0, zorder=0)
        ax2.axhline(0.0, color="#333333", linewidth=0.8, zorder=1)
        d_all = np.concatenate([blocks[f"dev_{n}"].to_numpy(dtype=np.float64) for n in present])
        d_all = np.abs(d_all[np.isfinite(d_all)])
        top = max(1.6 * 100 * tol, float(np.percentile(d_all, 98)) * 1.25 if d_all.size else 0.0)
        sc = None
        n_out = 0
        for n in present:
            y = blocks[n].to_numpy(dtype=np.float64)
            d = blocks[f"dev_{n}"].to_numpy(dtype=np.float64)
            out = np.abs(d) > top
            n_out += int(out.sum())
            kw = {"c": c, "cmap": TIME_CMAP, "norm": norm, "marker": MARKERS[n], "s": 22,
                  "edgecolors": "#222222", "linewidths": 0.4, "zorder": 3}
            ax1.scatter(x, y, **kw)
            sc = ax2.scatter(x, np.clip(d, -0.97 * top, 0.97 * top), **kw)
        if n_out:
            ax2.text(0.99, 0.02, f"{n_out} block(s) beyond \u00b1{top:.0f} % drawn at the edge",
                     transform=ax2.transAxes, ha="right", va="bottom", fontsize=7,
                     color="#444444")
        ax1.set_xlim(*xx)
        ax1.set_ylim(*xx)
        ax1.set_aspect("equal", adjustable="box")
        ax1.set_xlabel("lambda_flow, from air and fuel meters (\u2013)")
        ax1.set_ylabel("exhaust lambda (\u2013)")
        ax2.set_xlim(*xx)
        ax2.set_xlabel("lambda_flow, from air and fuel meters (\u2013)")
        ax2.set_ylabel("exhaust lambda / lambda_flow \u2212 1 (%)")
        ax2.set_ylim(-top, top)
        if sc is not None:
            time_colorbar(res, body, sc, ax2)
        handles = [
            Line2D([], [], linestyle="none", marker=MARKERS[n], markerfacecolor="white",
                   markeredgecolor="#222222", label=LABELS[n])
            for n in present
        ]
        handles.append(Line2D([], [], color="#333333", linewidth=0.8, label="1:1 / zero"))
        handles.append(Patch(facecolor="#d9d9d9", label=f"\u00b1{100 * tol:g} % tolerance"))
        body.legend(handles=handles, loc="outside lower center", ncols=len(handles),
                    fontsize=7.5)
        return finish(body, out_png)


def figure(res: ResultFile, out_dir: Path, stem: str) -> list[Path]:
    """Render this figure for the report (raises FigureSkipped when it cannot be made)."""
    path = Path(out_dir) / f"{stem}_{NAME}.png"
    plot_consistency(res, path)
    return [path]
