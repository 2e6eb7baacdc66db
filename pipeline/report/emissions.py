"""Figure "emissions": mass emission rates per steady point.

One panel per species (CO2, CO, NOx, THC, each when computed): the mean rate in g/h over the
steady, valid samples of each point (bars, numbered as in the steady-point table), with the
brake-specific value in g/kWh written above each bar when brake power is known. Points whose
verdict names a fault flag are hatched, so a result from a suspect analyzer is not taken at
face value.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.patches import Patch

from ..records import ProcessResult
from ..result import ResultFile, as_result
from . import reportdata as rd
from .plots import FigureSkipped, finish, report_figure

#: File name part of this figure.
NAME = "emissions"

#: Bar colour (Okabe-Ito blue) and hatch for points under a fault flag.
BAR = "#56B4E9"
HATCH = "////"


def emission_data(res: ResultFile) -> tuple[pd.DataFrame, list[str]]:
    """(steady-point stats with ``verdict`` and ``bs_<species>`` in g/kWh, species present).

    Raises :class:`FigureSkipped` when no emission rate was computed or no steady point.
    """
    names = [n for n in rd.EMISSIONS if rd.series(res, n) is not None]
    if not names:
        raise FigureSkipped("no emission rates in the result")
    pts = rd.steady_point_stats(res)
    if not len(pts):
        raise FigureSkipped("no steady points in the result")
    tol, _, _ = rd.tolerance(res)
    pts["verdict"] = rd.point_verdicts(pts, res.flags, tol)
    power = pts["brake_power"].to_numpy(dtype=np.float64)
    for n in names:
        with np.errstate(invalid="ignore", divide="ignore"):  # zero power: no bsfc -> NaN
            pts[f"bs_{n}"] = np.where(power > 0.5, pts[n].to_numpy() / power, np.nan)
    return pts, names


def plot_emissions(res: ResultFile | ProcessResult, out_png: Path | None = None) -> Figure:
    """Write the emissions figure (1600 px wide, one panel per species).

    Returns the drawn :class:`~matplotlib.figure.Figure` (written as PNG to ``out_png`` when
    given); ``res`` is a read result file or an in-memory result of
    :func:`pipeline.process_run`.
    """
    res = as_result(res)
    pts, names = emission_data(res)
    k = np.arange(len(pts))
    flagged = np.array([v != "ok" for v in pts["verdict"]])
    with report_figure(
        res, "Emission rates per steady point", 1.3 + 1.45 * len(names),
        caption="bars: mean rate (g/h) over steady, valid samples; "
        "numbers above bars: brake-specific (g/kWh); hatched: point under a fault flag",
    ) as body:
        axes = np.atleast_1d(body.subplots(len(names), 1, sharex=True))
        for ax, n in zip(axes, names, strict=True):
            v = pts[n].to_numpy(dtype=np.float64)
            ax.bar(k[~flagged], v[~flagged], color=BAR, edgecolor="#222222", linewidth=0.4)
            ax.bar(k[flagged], v[flagged], color="white", edgecolor="#222222", hatch=HATCH,
                   linewidth=0.4)
            top = float(np.nanmax(v)) if np.isfinite(v).any() else 1.0
            ax.set_ylim(0, 1.22 * top if top > 0 else 1.0)
            bs = pts[f"bs_{n}"].to_numpy(dtype=np.float64)
            for i in k:
                if np.isfinite(bs[i]) and np.isfinite(v[i]):
                    txt = f"{bs[i]:.0f}" if bs[i] >= 100 else f"{bs[i]:.2g}"
                    # a label over a bar in range stays inside the axes (0.2 of the height is
                    # free above the top bar), so the layout need not measure it
                    ax.text(i, v[i] + 0.02 * top, txt, ha="center", va="bottom", fontsize=5.8,
                            color="#333333", in_layout=not 0.0 <= v[i] <= top)
            ax.set_ylabel(f"{rd.EMISSIONS[n]}\n(g/h)")
            ax.grid(axis="x", visible=False)
        labels = [
            f"{p:.0f}\n{s:.0f}\n{t:.0f}"
            for p, s, t in zip(pts["point"], pts["speed"], pts["torque"], strict=True)
        ]
        axes[-1].set_xticks(k, labels, fontsize=6.5)
        axes[-1].set_xlabel("steady point no. / speed (rpm) / torque (N\u00b7m)")
        handles = [Patch(facecolor=BAR, edgecolor="#222222", label="steady point"),
                   Patch(facecolor="white", edgecolor="#222222", hatch=HATCH,
                         label="under a fault flag (suspect value)")]
        body.legend(handles=handles, loc="outside lower center", ncols=2, fontsize=7.5)
        return finish(body, out_png)


def figure(res: ResultFile, out_dir: Path, stem: str) -> list[Path]:
    """Render this figure for the report (raises FigureSkipped when it cannot be made)."""
    path = Path(out_dir) / f"{stem}_{NAME}.png"
    plot_emissions(res, path)
    return [path]
