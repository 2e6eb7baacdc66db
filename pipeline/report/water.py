"""Figure "water": exhaust dew point against the sample-line temperature, condensation margin.

Top: ``exhaust_dewpoint`` and ``sample_line_temperature`` against time (min/max envelope and
bin mean), with ``condensation_risk`` flags shaded. Bottom: the margin (line temperature minus
dew point) in K with the zero line; below zero, water condenses in the line and the
analyzers read wrong. When the sample-line temperature is not logged the figure is skipped
(the dew point alone says nothing about condensation in this cell); the summary notes why.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ..records import ProcessResult
from ..result import ResultFile, as_result
from . import reportdata as rd
from .plots import (
    BINS_PER_PIXEL,
    DPI,
    WIDTH_IN,
    FigureSkipped,
    bin_mean,
    envelope,
    envelope_bins,
    finish,
    format_time_axis,
    night_x,
    report_figure,
)

#: File name part of this figure.
NAME = "water"

#: Condensation margin [K] drawn when the result does not record the configured one
#: (``[sampling] condensation_margin_K``, which the condensation_risk check used).
GUIDE_MARGIN_K = 5.0


def configured_margin(res: ResultFile) -> float:
    """The condensation margin the run used, from the resolved config in the result file."""
    import tomllib

    try:
        cfg = tomllib.loads(str(res.attrs.get("config_toml", "")))
        return float(cfg.get("sampling", {}).get("condensation_margin_K", GUIDE_MARGIN_K))
    except (tomllib.TOMLDecodeError, TypeError, ValueError):
        return GUIDE_MARGIN_K


def water_data(res: ResultFile) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(time [s], exhaust dew point [degC], margin = line temperature - dew point [K]).

    Raises :class:`FigureSkipped` when either series is absent.
    """
    dew = rd.series(res, "exhaust_dewpoint")
    line = rd.series(res, "sample_line_temperature")
    if dew is None:
        raise FigureSkipped("no exhaust dew point in the result")
    if line is None:
        raise FigureSkipped(
            "sample_line_temperature not logged, so the condensation margin cannot be shown "
            f"(exhaust dew point peaks at {np.nanmax(dew):.1f} \u00b0C)"
        )
    t = res.timeseries["time"].to_numpy(dtype=np.float64)
    return t, dew, line - dew


def _trace(ax, x, v, n_bins, color, ls):  # noqa: ANN001, ANN202 - local drawing helper
    ex, ey = envelope(x, v, min(n_bins, envelope_bins(x.size, WIDTH_IN * DPI)))
    ax.plot(ex, ey, color=color, linewidth=0.5, alpha=0.35)
    mx, my = bin_mean(x, v, min(n_bins, max(1, v.size // 2)))
    ax.plot(mx, my, color=color, linestyle=ls, linewidth=1.4)


def plot_water(res: ResultFile | ProcessResult, out_png: Path | None = None) -> Figure:
    """Write the water figure (1600 x 960 px).

    Returns the drawn :class:`~matplotlib.figure.Figure` (written as PNG to ``out_png`` when
    given); ``res`` is a read result file or an in-memory result of
    :func:`pipeline.process_run`.
    """
    res = as_result(res)
    t, dew, margin = water_data(res)
    guide = configured_margin(res)
    line = dew + margin
    conv, _, _ = night_x(res)
    x = conv(t)
    n_bins = max(1, int(BINS_PER_PIXEL * WIDTH_IN * DPI) // 2)
    with report_figure(res, "Exhaust water: dew point and sample-line margin", 4.8) as body:
        ax, axm = body.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [1.4, 1]})
        _trace(ax, x, line, n_bins, "#0072B2", "-")
        _trace(ax, x, dew, n_bins, "#D55E00", "--")
        ax.set_ylabel("temperature (\u00b0C)")
        _trace(axm, x, margin, n_bins, "#000000", "-")
        axm.axhline(0.0, color="#D55E00", linewidth=1.0)
        axm.axhline(guide, color="#555555", linewidth=0.8, linestyle=(0, (4, 3)))
        axm.set_ylabel("margin (K)")
        axm.fill_between([x[0], x[-1]], [0, 0], [-1e3, -1e3], color="#fbe3d6", zorder=0)
        lo = min(-2.0, float(np.nanpercentile(margin, 0.5)) - 2.0)
        hi = max(guide + 5.0, float(np.nanpercentile(margin, 99.5)) + 2.0)
        axm.set_ylim(lo, hi)
        flags = res.flags
        risk = flags[flags["check"].astype(str) == "condensation_risk"] if len(flags) else flags
        for _, row in risk.iterrows():
            for a in (ax, axm):
                a.axvspan(conv(row["start_s"]), conv(row["end_s"]), color="#f4a582", alpha=0.4,
                          linewidth=0)
        axm.set_xlim(x[0], x[-1])
        format_time_axis(res, axm)
        handles = [
            Line2D([], [], color="#0072B2", linewidth=1.4, label="sample line temperature"),
            Line2D([], [], color="#D55E00", linestyle="--", linewidth=1.4,
                   label="exhaust dew point"),
            Line2D([], [], color="#000000", linewidth=1.4, label="margin = line \u2212 dew point"),
            Line2D([], [], color="#555555", linewidth=0.8, linestyle=(0, (4, 3)),
                   label=f"{guide:g} K condensation margin (config)"),
            Patch(facecolor="#fbe3d6", label="condensation (margin < 0)"),
        ]
        if len(risk):
            handles.append(Patch(facecolor="#f4a582", alpha=0.4, label="condensation_risk flag"))
        body.legend(handles=handles, loc="outside lower center", ncols=3, fontsize=7.5)
        return finish(body, out_png)


def figure(res: ResultFile, out_dir: Path, stem: str) -> list[Path]:
    """Render this figure for the report (raises FigureSkipped when it cannot be made)."""
    path = Path(out_dir) / f"{stem}_{NAME}.png"
    plot_water(res, path)
    return [path]
