"""Figure "overview": the night's lambda estimates against time, flags and steady points.

Built from a read-back result only. See :func:`plot_lambda_overview`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.collections import PolyCollection
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ..records import ProcessResult
from ..result import ResultFile, as_result
from . import reportdata as rd
from .plots import (
    BINS_PER_PIXEL,
    DPI,
    FIGSIZE,
    FLAG_LANES,
    LAMBDA_SERIES,
    SERIES_STYLE,
    SEVERITY_STYLE,
    SPAN_STYLE,
    bin_mean,
    envelope,
    envelope_bins,
    finish,
    format_time_axis,
    night_x,
    report_figure,
    robust_limits,
)

#: File name part of this figure.
NAME = "lambda"

def _flag_x(
    flags: pd.DataFrame, conv: Any, x_range: tuple[float, float]
) -> tuple[np.ndarray, np.ndarray]:
    """Start and end of each flag on the x axis; zero-length flags get a visible hairline."""
    x0 = conv(flags["start_s"].to_numpy(dtype=np.float64))
    x1 = conv(flags["end_s"].to_numpy(dtype=np.float64))
    return x0, np.maximum(x1, x0 + 1.5e-3 * (x_range[1] - x_range[0]))


def _severity_key(severity: np.ndarray) -> np.ndarray:
    """Severity names mapped onto SEVERITY_STYLE keys (anything unknown counts as info)."""
    return np.where(np.isin(severity, ["error", "warning"]), severity, "info")


def _spans(
    ax: Axes, x0: np.ndarray, x1: np.ndarray, y0: float, y1: float, transform: Any, **kw: Any
) -> None:
    """One PolyCollection of rectangles [x0, x1] x [y0, y1] (one artist for many flags)."""
    verts = np.stack([np.column_stack([x0, np.full_like(x0, y)]) for y in (y0, y1)], axis=1)
    rects = np.concatenate([verts, verts[:, ::-1]], axis=1)  # (x0,y0) (x0,y1) (x1,y1) (x1,y0)
    rects[:, 2:, 0] = x1[:, None]
    ax.add_collection(PolyCollection(rects, transform=transform, **kw), autolim=False)


def _shade_flags(
    ax: Axes, flags: pd.DataFrame, conv: Any, x_range: tuple[float, float]
) -> list[Any]:
    """Shade the flagged intervals over the full plot height. Returns legend handles.

    ``analyzer_not_sampling`` and ``data_gap`` get grey hatched fills on top; other checks
    get a light tint by severity underneath (their labels are in the flag strip).
    """
    handles: list[Any] = []
    if len(flags) == 0:
        return handles
    x0, x1 = _flag_x(flags, conv, x_range)
    check = flags["check"].astype(str).to_numpy()
    sev = _severity_key(flags["severity"].astype(str).to_numpy())
    blend = ax.get_xaxis_transform()  # x in data, y in axes fraction
    other = ~np.isin(check, list(SPAN_STYLE))
    for key, st in SEVERITY_STYLE.items():
        mask = other & (sev == key)
        if mask.any():
            _spans(
                ax,
                x0[mask],
                x1[mask],
                0.0,
                1.0,
                blend,
                facecolor=st["facecolor"],
                edgecolor="none",
                alpha=0.35,
                zorder=0.4,
            )
    for name, st in SPAN_STYLE.items():
        mask = check == name
        if mask.any():
            kw = {k: v for k, v in st.items() if k != "label"}
            _spans(ax, x0[mask], x1[mask], 0.0, 1.0, blend, linewidth=0.5, zorder=0.5, **kw)
            handles.append(Patch(label=st["label"], **kw))
    return handles


def _flag_strip(
    ax: Axes, flags: pd.DataFrame, conv: Any, x_range: tuple[float, float], rows: int
) -> list[Any]:
    """Every flag other than gaps as a bar in one of ``rows`` lanes, labelled "check: suspect"
    (or just the suspect, or nothing) as far as the room before the next bar allows.

    Returns legend handles (one per severity shown).
    """
    x0, x1 = _flag_x(flags, conv, x_range)
    sev = _severity_key(flags["severity"].astype(str).to_numpy())
    checks = flags["check"].astype(str).to_numpy()
    suspects = flags["suspect"].astype(str).to_numpy()
    char = 0.0092 * (x_range[1] - x_range[0])  # width of one 7 pt character on this axes
    order = np.argsort(x0, kind="stable")
    lane_end = np.full(rows, -np.inf)
    lane = np.zeros(len(flags), dtype=int)
    for i in order:  # greedy interval packing; when all lanes are busy, the earliest-free one
        free = np.flatnonzero(lane_end < x0[i])
        lane[i] = free[0] if free.size else int(np.argmin(lane_end))
        lane_end[lane[i]] = max(lane_end[lane[i]], x1[i])
    unlabelled = 0
    for r in range(rows):
        idx = order[lane[order] == r]
        if not idx.size:
            continue
        next_start = np.r_[x0[idx][1:], x_range[1] + 0.02 * (x_range[1] - x_range[0])]
        for i, stop in zip(idx, next_start, strict=True):
            start = max(x0[i], x_range[0])
            room = (stop - start) / char - 1
            full = f"{checks[i]}: {suspects[i]}" if suspects[i] else checks[i]
            text = full if len(full) <= room else (suspects[i] or checks[i])
            if len(text) > room:
                unlabelled += 1
                continue
            ax.text(
                start,
                rows - r - 0.5,
                " " + text,
                fontsize=7,
                va="center",
                ha="left",
                clip_on=True,
                color="#3a1d08",
                zorder=3,
            )
    handles = []
    for key, st in SEVERITY_STYLE.items():
        mask = sev == key
        if mask.any():
            for r in np.unique(lane[mask]):
                m = mask & (lane == r)
                _spans(
                    ax,
                    x0[m],
                    x1[m],
                    rows - r - 0.9,
                    rows - r - 0.1,
                    ax.transData,
                    facecolor=st["facecolor"],
                    edgecolor="#8b4513",
                    linewidth=0.6,
                    zorder=2,
                )
            handles.append(Patch(facecolor=st["facecolor"], edgecolor="#8b4513", label=st["label"]))
    ax.set_ylim(0, rows)
    ax.set_yticks([])
    ax.set_ylabel("flags", rotation=0, ha="right", va="center")
    ax.grid(axis="y", visible=False)
    ax.tick_params(axis="x", labelbottom=False)
    for side in ("left", "top", "right"):
        ax.spines[side].set_visible(False)
    if unlabelled:
        ax.set_title(
            f"{len(flags)} flags; {unlabelled} without room for a label (all in /flags)",
            loc="right",
            fontsize=7,
        )
    return handles


def _draw_series(
    ax: Axes,
    x: np.ndarray,
    v: np.ndarray,
    name: str,
    unit: str,
    n_bins: int,
    ylim: tuple[float, float],
) -> tuple[list[Any], bool]:
    """One estimate: min/max envelope (light) plus bin mean (styled line); marks values beyond
    the y range at the axis edge. Returns (legend handles, whether anything is beyond)."""
    st = SERIES_STYLE[name]
    ex, ey = envelope(x, v, envelope_bins(int(np.isfinite(x).sum()), FIGSIZE[0] * DPI))
    label = st["label"] + ("" if unit in ("1", "") else f" [{unit}]")
    if ex.size > np.isfinite(x).sum():  # short trace: drawn as it is (with gap breaks)
        ax.plot(ex, ey, color=st["color"], linestyle=st["linestyle"], linewidth=1.2, zorder=2)
    else:
        ax.plot(ex, ey, color=st["color"], linestyle="-", linewidth=0.5, alpha=0.35, zorder=1.5)
        mx, my = bin_mean(x, v, n_bins)
        ax.plot(mx, my, color=st["color"], linestyle=st["linestyle"], linewidth=1.4, zorder=2)
    handle = Line2D(
        [], [], color=st["color"], linestyle=st["linestyle"], linewidth=1.6, label=label
    )
    beyond = False
    blend = ax.get_xaxis_transform()
    for mask, yy, marker in ((ey > ylim[1], 0.99, "^"), (ey < ylim[0], 0.01, "v")):
        if mask.any():
            beyond = True
            ax.plot(
                ex[mask],
                np.full(int(mask.sum()), yy),
                linestyle="none",
                marker=marker,
                markersize=5,
                markeredgewidth=0.5,
                markeredgecolor="white",
                color=st["color"],
                transform=blend,
                clip_on=False,
                zorder=3,
            )
    return [handle], beyond




def _steady_rug(ax: Axes, res: ResultFile, conv: Any, x_range: tuple[float, float]) -> list[Any]:
    """Steady points as a dark bar along the bottom of the plot, numbered as in the steady-point
    table (every point when there is room, else every n-th). Returns legend handles."""
    w = rd.steady_windows(res)
    if not len(w):
        return []
    x0 = conv(w["start_s"].to_numpy(dtype=np.float64))
    x1 = conv(w["end_s"].to_numpy(dtype=np.float64))
    _spans(ax, x0, x1, 0.0, 0.022, ax.get_xaxis_transform(), facecolor="#333333",
           edgecolor="none", zorder=2.5)
    span = x_range[1] - x_range[0]
    min_gap = 0.018 * span
    last = -np.inf
    for k, (a, b) in enumerate(zip(x0, x1, strict=True)):
        mid = 0.5 * (a + b)
        if mid - last < min_gap:
            continue
        last = mid
        ax.text(mid, 0.03, str(k + 1), transform=ax.get_xaxis_transform(), fontsize=6.5,
                ha="center", va="bottom", color="#222222", zorder=3, clip_on=True)
    return [Patch(facecolor="#333333", label="steady point (no. as in table)")]


def plot_lambda_overview(res: ResultFile | ProcessResult, out_png: Path | None = None) -> Figure:
    """The night's lambda estimates against time, with flagged intervals; writes a PNG.

    Draws ``lambda_flow``, ``lambda_carbon``, ``lambda_oxygen`` and ``lambda_sensor`` (each
    only when present in the result). Long traces are drawn as their min/max envelope (light,
    keeps every spike) with the bin mean on top (colour and line style per estimate). Flags
    ``analyzer_not_sampling`` and ``data_gap`` are grey hatched spans; other flags are tinted
    by severity and labelled "check: suspect" in a strip above the plot. Steady points are a
    numbered bar along the bottom. The y range follows robust percentiles; samples beyond it
    are marked with triangles at the axis edge. The x axis is clock time (UTC) when the start
    of the run is known, else hours since start. 1600 x 960 px.

    Returns the drawn :class:`~matplotlib.figure.Figure` (written as PNG to ``out_png`` when
    given); ``res`` is a read result file or an in-memory result of
    :func:`pipeline.process_run`.
    """
    res = as_result(res)
    flags = res.flags
    labelled = flags[~flags["check"].astype(str).isin(list(SPAN_STYLE))] if len(flags) else flags
    with report_figure(res, "Lambda estimates over the night", FIGSIZE[1]) as body:
        if len(labelled):
            rows = int(min(FLAG_LANES, len(labelled)))
            strip, ax = body.subplots(
                2, 1, sharex=True, gridspec_kw={"height_ratios": [0.6 + 0.5 * rows, 10]}
            )
            axes: list[Axes] = [strip, ax]
        else:
            ax = body.add_subplot()
            axes = [ax]
        conv, _, _ = night_x(res)
        x = conv(res.timeseries["time"].to_numpy(dtype=np.float64))
        format_time_axis(res, axes[-1])
        finite_x = x[np.isfinite(x)]
        x_range = (float(finite_x.min()), float(finite_x.max())) if finite_x.size else (0.0, 1.0)
        if x_range[1] <= x_range[0]:
            x_range = (x_range[0], x_range[0] + 1.0)
        n_bins = max(1, int(BINS_PER_PIXEL * FIGSIZE[0] * DPI))

        present = [n for n in LAMBDA_SERIES if rd.series(res, n) is not None]
        # where the engine is off the sensor reads its "in air" value and nothing else has a
        # lambda: those samples are not drawn (the engine_off spans say why)
        on = rd.engine_running(res)
        values = [np.where(on, res.timeseries[n].to_numpy(dtype=np.float64), np.nan)
                  for n in present]
        ylim = robust_limits(np.concatenate(values) if values else np.array([]))

        handles: list[Any] = []
        beyond = False
        for name, v in zip(present, values, strict=True):
            h, b = _draw_series(ax, x, v, name, res.units.get(name, "1"), n_bins, ylim)
            handles += h
            beyond |= b
        if beyond:
            handles.append(
                Line2D([], [], linestyle="none", marker="^", color="#555555", markersize=5,
                       label="beyond the y range (at edge)")
            )
        if any(v.size > 2 * n_bins for v in values):
            handles.append(
                Patch(facecolor="#bbbbbb", alpha=0.6,
                      label="min\u2013max band per plotted interval")
            )
        if ylim[0] < 1.0 < ylim[1]:
            ax.axhline(1.0, color="#444444", linewidth=0.7, linestyle=(0, (2, 3)), zorder=1)
            handles.append(
                Line2D([], [], color="#444444", linewidth=0.7, linestyle=(0, (2, 3)),
                       label="lambda = 1 (stoichiometric)")
            )
        handles += _shade_flags(ax, flags, conv, x_range)
        handles += _steady_rug(ax, res, conv, x_range)
        if len(labelled):
            handles += _flag_strip(axes[0], labelled, conv, x_range, rows)

        if not present:
            ax.text(0.5, 0.5, "no lambda estimate in this result file", transform=ax.transAxes,
                    ha="center", va="center", fontsize=12, color="#444444")
        ax.set_xlim(*x_range)
        ax.set_ylim(*ylim)
        ax.set_ylabel("lambda (\u2013)")
        if handles:
            body.legend(handles=handles, loc="outside lower center", ncols=3, fontsize=7.5)
        return finish(body, out_png)


def figure(res: ResultFile, out_dir: Path, stem: str) -> list[Path]:
    """Render this figure for the report (see :func:`plot_lambda_overview`)."""
    path = Path(out_dir) / f"{stem}_{NAME}.png"
    plot_lambda_overview(res, path)
    return [path]


__all__ = ["NAME", "figure", "plot_lambda_overview"]
