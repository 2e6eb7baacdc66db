"""Figure "fuel": measured fuel flow against the fuel flow implied by the exhaust carbon.

Left: ``fuel_mass_flow_carbon`` (air flow and exhaust carbon, from the checks stage) against
the measured ``fuel_mass_flow`` per 5-minute steady block, coloured by time of night, with
the 1:1 line and the +-tolerance band. Right: their relative difference (the 40 CFR 1065.643
style carbon-balance check in rate form) against time, per block, with the tolerance band.
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
from .plots import (
    TIME_CMAP,
    FigureSkipped,
    finish,
    format_time_axis,
    night_x,
    report_figure,
    time_colorbar,
)

#: File name part of this figure.
NAME = "fuel"


def fuel_data(res: ResultFile) -> tuple[pd.DataFrame, float]:
    """(steady blocks with ``fuel_diff_pct`` = 100 (carbon / measured - 1), tolerance).

    Raises :class:`FigureSkipped` without both fuel flows or without steady points.
    """
    if rd.series(res, "fuel_mass_flow") is None:
        raise FigureSkipped("fuel_mass_flow not logged")
    if rd.series(res, "fuel_mass_flow_carbon") is None:
        raise FigureSkipped("no carbon-balance fuel flow (fuel_mass_flow_carbon) in the result")
    b = rd.steady_blocks(res)
    if len(b):
        b = b[np.isfinite(b["fuel_mass_flow"]) & np.isfinite(b["fuel_mass_flow_carbon"])]
    if not len(b):
        raise FigureSkipped("no steady point with both fuel flows")
    b = b.reset_index(drop=True)
    b["fuel_diff_pct"] = 100.0 * (b["fuel_mass_flow_carbon"] / b["fuel_mass_flow"] - 1.0)
    tol, _, _ = rd.tolerance(res)
    return b, tol


def plot_fuel(res: ResultFile | ProcessResult, out_png: Path | None = None) -> Figure:
    """Write the fuel-flow figure (1600 x 800 px).

    Returns the drawn :class:`~matplotlib.figure.Figure` (written as PNG to ``out_png`` when
    given); ``res`` is a read result file or an in-memory result of
    :func:`pipeline.process_run`.
    """
    res = as_result(res)
    b, tol = fuel_data(res)
    conv, _, _ = night_x(res)
    c = conv(b["t_s"].to_numpy(dtype=np.float64))
    t_all = conv(res.timeseries["time"].to_numpy(dtype=np.float64))
    norm = Normalize(float(np.nanmin(t_all)), float(np.nanmax(t_all)))
    with report_figure(
        res, "Fuel flow: measured against carbon balance", 4.0,
        caption="each marker: mean of a 5-min block inside a steady point; colour: time of night",
    ) as body:
        ax1, ax2 = body.subplots(1, 2, gridspec_kw={"width_ratios": [1, 1.35]})
        m = b["fuel_mass_flow"].to_numpy(dtype=np.float64)
        f = b["fuel_mass_flow_carbon"].to_numpy(dtype=np.float64)
        d = b["fuel_diff_pct"].to_numpy(dtype=np.float64)
        hi = float(np.nanmax(np.r_[m, f])) * 1.08
        xx = np.array([0.0, hi])
        ax1.fill_between(xx, xx * (1 - tol), xx * (1 + tol), color="#d9d9d9", linewidth=0)
        ax1.plot(xx, xx, color="#333333", linewidth=0.8)
        kw = {"c": c, "cmap": TIME_CMAP, "norm": norm, "s": 20, "edgecolors": "#222222",
              "linewidths": 0.4, "zorder": 3}
        ax1.scatter(m, f, **kw)
        ax1.set_xlim(*xx)
        ax1.set_ylim(*xx)
        ax1.set_aspect("equal", adjustable="box")
        ax1.set_xlabel("measured fuel flow (kg/h)")
        ax1.set_ylabel("fuel flow from exhaust carbon (kg/h)")
        ax2.axhspan(-100 * tol, 100 * tol, color="#d9d9d9", linewidth=0, zorder=0)
        ax2.axhline(0.0, color="#333333", linewidth=0.8)
        top = max(1.6 * 100 * tol, float(np.nanpercentile(np.abs(d), 98)) * 1.25)
        sc = ax2.scatter(conv(b["t_s"].to_numpy()), np.clip(d, -0.97 * top, 0.97 * top), **kw)
        ax2.set_ylim(-top, top)
        ax2.set_xlim(float(np.nanmin(t_all)), float(np.nanmax(t_all)))
        ax2.set_ylabel("carbon-balance / measured \u2212 1 (%)")
        format_time_axis(res, ax2, maxticks=7)
        time_colorbar(res, body, sc, ax2)
        handles = [
            Line2D([], [], color="#333333", linewidth=0.8, label="1:1 / zero"),
            Patch(facecolor="#d9d9d9", label=f"\u00b1{100 * tol:g} % tolerance"),
        ]
        body.legend(handles=handles, loc="outside lower center", ncols=2, fontsize=7.5)
        return finish(body, out_png)


def figure(res: ResultFile, out_dir: Path, stem: str) -> list[Path]:
    """Render this figure for the report (raises FigureSkipped when it cannot be made)."""
    path = Path(out_dir) / f"{stem}_{NAME}.png"
    plot_fuel(res, path)
    return [path]
