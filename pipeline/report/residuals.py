"""Figure "residuals": one panel per lambda residual against time, with the drift findings.

Each panel shows the residual in percent on steady, valid samples only: the min/max envelope
(light) and 5-minute block means (markers); the drift baseline of ``/drift/`` (solid), the
band of +- the minimum detectable drift around it (dashed), and for a detected drift the onset
(vertical line) and the size (an arrow from the baseline at the end of the drift, labelled
with onset time, size and rate). Without a ``/drift/`` table the panels show the residuals
only (noted in the caption).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ..records import ProcessResult
from ..result import ResultFile, as_result
from . import reportdata as rd
from .plots import (
    DPI,
    WIDTH_IN,
    FigureSkipped,
    envelope,
    envelope_bins,
    finish,
    format_time_axis,
    night_x,
    report_figure,
)

#: File name part of this figure.
NAME = "residuals"

#: Colour of the residual traces (Okabe-Ito blue) and of the drift marks (vermillion).
TRACE = "#0072B2"
DRIFT = "#D55E00"


def residual_data(res: ResultFile) -> tuple[list[str], pd.DataFrame | None]:
    """(residual series present, the ``/drift/`` table or None).

    Raises :class:`FigureSkipped` when the result holds no residual series.
    """
    names = [n for n in rd.RESIDUALS if rd.series(res, n) is not None]
    if not names:
        raise FigureSkipped("no residual series in the result (checks stage not run)")
    drift = res.tables.get("drift")
    if drift is not None and (not len(drift) or "residual" not in drift):
        drift = None
    return names, drift


def drift_row(drift: pd.DataFrame | None, name: str) -> dict[str, float | str | bool]:
    """The ``/drift/`` row of one residual as a dict (baseline etc. in %), empty when none."""
    if drift is None:
        return {}
    rows = drift[drift["residual"].astype(str) == name]
    if not len(rows):
        return {}
    r = rows.iloc[0]

    def num(key: str, scale: float = 1.0) -> float:
        return float(r[key]) * scale if key in r and pd.notna(r[key]) else float("nan")

    return {
        "baseline_pct": num("baseline", 100.0),
        "mdd_pct": num("min_detectable_drift_pct"),
        "onset_s": num("onset_s"),
        "end_s": num("end_s"),
        "size_pct": num("size_pct"),
        "rate_pct_per_h": num("rate_pct_per_h"),
        "kind": str(r["kind"]) if "kind" in r and pd.notna(r["kind"]) else "",
        "detected": bool(num("detected") > 0) if "detected" in r else False,
    }


def plot_residuals(res: ResultFile | ProcessResult, out_png: Path | None = None) -> Figure:
    """Write the residual-trend figure (1600 px wide, 2 columns of panels).

    Returns the drawn :class:`~matplotlib.figure.Figure` (written as PNG to ``out_png`` when
    given); ``res`` is a read result file or an in-memory result of
    :func:`pipeline.process_run`.
    """
    res = as_result(res)
    names, drift = residual_data(res)
    conv, _, _ = night_x(res)
    t = res.timeseries["time"].to_numpy(dtype=np.float64)
    x = conv(t)
    use = rd.point_index(res) >= 0
    rows = int(np.ceil(len(names) / 2))
    ncols = 1 if len(names) == 1 else 2
    caption = (
        "steady, valid samples only; markers: 5-min block means; "
        + ("solid: drift baseline, dashed: \u00b1 minimum detectable drift"
           if drift is not None else "no /drift/ table in this result: residuals only")
    )
    width_px = WIDTH_IN * DPI / ncols
    with report_figure(res, "Lambda residual trends", 1.2 + 1.9 * rows, caption) as body:
        axes = np.atleast_1d(body.subplots(rows, ncols, sharex=True, squeeze=False)).ravel()
        for ax in axes[len(names):]:
            ax.remove()
        for ax, name in zip(axes, names, strict=False):
            v = 100.0 * res.timeseries[name].to_numpy(dtype=np.float64)
            # envelope over the stretch with steady samples (the part the panel shows)
            vm = np.where(use, v, np.nan)
            fin = np.flatnonzero(np.isfinite(vm))
            span = slice(fin[0], fin[-1] + 1) if fin.size else slice(0, 0)
            n_span = int(np.isfinite(x[span]).sum())
            ex, ey = envelope(x[span], vm[span], envelope_bins(n_span, width_px))
            ax.plot(ex, ey, color=TRACE, linewidth=0.5, alpha=0.35, zorder=1)
            tb, mean, _, _ = rd.time_blocks(res, name)
            ax.plot(conv(tb), 100.0 * mean, linestyle="none", marker="o", markersize=2.6,
                    color=TRACE, zorder=2)
            d = drift_row(drift, name)
            m_ok = 100.0 * mean[np.isfinite(mean)]
            vals = [np.percentile(m_ok, [2.0, 98.0])] if m_ok.size else []
            if d and np.isfinite(d["baseline_pct"]):
                b = float(d["baseline_pct"])
                ax.axhline(b, color="#222222", linewidth=0.9, zorder=3)
                mdd = float(d["mdd_pct"])
                if np.isfinite(mdd):
                    for s in (-1, 1):
                        ax.axhline(b + s * mdd, color="#222222", linewidth=0.8,
                                   linestyle=(0, (4, 3)), zorder=3)
                    vals.append(np.array([b - 1.3 * mdd, b + 1.3 * mdd]))
                if d["detected"] and np.isfinite(d["onset_s"]):
                    xo = float(conv(d["onset_s"]))
                    ax.axvline(xo, color=DRIFT, linewidth=1.2, zorder=4)
                    size = float(d["size_pct"])
                    end = d["end_s"] if np.isfinite(d["end_s"]) else t[-1]
                    xe = float(conv(end))
                    if np.isfinite(size):
                        ax.annotate("", xy=(xe, b + size), xytext=(xe, b), zorder=5,
                                    arrowprops={"arrowstyle": "-|>", "color": DRIFT, "lw": 1.4,
                                                "shrinkA": 0, "shrinkB": 0})
                        vals.append(np.array([b + size]))
                    rate = float(d["rate_pct_per_h"])
                    text = f"{d['kind'] or 'drift'} from {rd.clock(res, d['onset_s'])}\n" + (
                        f"size {size:+.1f} %" if np.isfinite(size) else "size unknown"
                    ) + (
                        f", {rate:+.2f} %/h"
                        if np.isfinite(rate) and d["kind"] != "step"
                        else ""
                    )
                    upper = not (np.isfinite(size) and size < 0)
                    ax.text(0.015, 0.95 if upper else 0.05, text, transform=ax.transAxes,
                            fontsize=7, color=DRIFT, va="top" if upper else "bottom",
                            ha="left", zorder=6,
                            bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.85,
                                  "pad": 1.5})
            allv = np.concatenate([np.atleast_1d(a) for a in vals]) if vals else np.array([])
            allv = allv[np.isfinite(allv)]
            if allv.size:
                lo, hi = float(allv.min()), float(allv.max())
                pad = max(0.15 * (hi - lo), 0.3)
                lo, hi = lo - pad, hi + pad
                ax.set_ylim(lo, hi)
                m = 100.0 * mean
                out = (m < lo) | (m > hi)
                if out.any():
                    ax.plot(conv(tb[out]), np.where(m[out] > hi, 0.97, 0.03), linestyle="none",
                            marker="x", color=TRACE, markersize=4,
                            transform=ax.get_xaxis_transform(), zorder=6)
            a, bname = rd.RESIDUALS[name]
            ax.set_title(f"{a} / {bname} \u2212 1", loc="left", fontsize=8.5)
            ax.set_ylabel("residual (%)")
            format_time_axis(res, ax, label=False, maxticks=7)
        for ax in axes[: len(names)][-ncols:]:
            format_time_axis(res, ax, label=True, maxticks=7)
            ax.tick_params(labelbottom=True)
        handles = [
            Line2D([], [], linestyle="none", marker="o", markersize=3, color=TRACE,
                   label="5-min block mean"),
            Patch(facecolor=TRACE, alpha=0.35, label="min\u2013max of steady samples"),
            Line2D([], [], linestyle="none", marker="x", markersize=4, color=TRACE,
                   label="block mean off scale"),
        ]
        if drift is not None:
            handles += [
                Line2D([], [], color="#222222", linewidth=0.9, label="baseline"),
                Line2D([], [], color="#222222", linewidth=0.8, linestyle=(0, (4, 3)),
                       label="\u00b1 min. detectable drift"),
                Line2D([], [], color=DRIFT, linewidth=1.2, label="drift onset / size (arrow)"),
            ]
        body.legend(handles=handles, loc="outside lower center", ncols=3, fontsize=7.5)
        return finish(body, out_png)


def figure(res: ResultFile, out_dir: Path, stem: str) -> list[Path]:
    """Render this figure for the report (raises FigureSkipped when it cannot be made)."""
    path = Path(out_dir) / f"{stem}_{NAME}.png"
    plot_residuals(res, path)
    return [path]
