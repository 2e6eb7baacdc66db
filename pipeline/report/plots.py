"""Report figures, built from a read-back result file only (:class:`pipeline.result.ResultFile`).

Figures are made with :class:`matplotlib.figure.Figure` on the Agg canvas (no pyplot global
state), a fixed size and dpi with constrained layout, and the packaged style
``pipeline/data/dynoqc.mplstyle`` (ECOSYSTEM.md §6). Long traces are drawn through a min/max
envelope so single-sample spikes survive and the drawing stays fast.
"""

from __future__ import annotations

from collections.abc import Sequence
from importlib import resources
from pathlib import Path
from typing import Any

import matplotlib.dates as mdates
import numpy as np
import pandas as pd
from matplotlib import style
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import PolyCollection
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ..result import ResultFile

#: The lambda estimates drawn by :func:`plot_lambda_overview`, in drawing order.
LAMBDA_SERIES = ("lambda_flow", "lambda_carbon", "lambda_oxygen", "lambda_sensor")

#: Fixed look per estimate (Okabe-Ito colours, one line style each, so the same estimate looks
#: the same in every figure and the traces separate in greyscale print).
SERIES_STYLE: dict[str, dict[str, Any]] = {
    "lambda_flow": {
        "color": "#0072B2",
        "linestyle": "-",
        "label": "lambda_flow (air + fuel meters)",
    },
    "lambda_carbon": {
        "color": "#D55E00",
        "linestyle": "--",
        "label": "lambda_carbon (carbon balance: CO2, CO, THC)",
    },
    "lambda_oxygen": {
        "color": "#009E73",
        "linestyle": "-.",
        "label": "lambda_oxygen (oxygen balance: O2)",
    },
    "lambda_sensor": {"color": "#000000", "linestyle": ":", "label": "lambda_sensor (wide-band)"},
}

#: Shading of flagged intervals: checks that say "no usable exhaust data here" get their own
#: grey tone and hatch; every other check is shaded by severity and labelled.
SPAN_STYLE: dict[str, dict[str, Any]] = {
    "analyzer_not_sampling": {
        "facecolor": "#d0d0d0",
        "hatch": "////",
        "edgecolor": "#707070",
        "label": "analyzers not sampling exhaust",
    },
    "data_gap": {
        "facecolor": "#f2f2f2",
        "hatch": "xx",
        "edgecolor": "#909090",
        "label": "data gap",
    },
}
SEVERITY_STYLE: dict[str, dict[str, Any]] = {
    "error": {"facecolor": "#f4a582", "label": "flagged: error"},
    "warning": {"facecolor": "#fddbc7", "label": "flagged: warning"},
    "info": {"facecolor": "#e8e8f4", "label": "flagged: info"},
}

#: Figure size [in] and resolution [dpi]: 1800 x 900 px.
FIGSIZE = (12.0, 6.0)
DPI = 150

#: Envelope bins per pixel of figure width (2-3 keeps every extreme visible).
BINS_PER_PIXEL = 2.5

#: Percentiles [%] that set the y range, so one spike does not squash the night.
Y_PERCENTILES = (0.5, 99.5)

#: Lanes of the flag strip above the plot.
FLAG_LANES = 3


def style_path() -> Path:
    """Path of the packaged matplotlib style file ``dynoqc.mplstyle``."""
    return Path(str(resources.files("pipeline") / "data" / "dynoqc.mplstyle"))


def envelope(
    t: Sequence[float] | np.ndarray, y: Sequence[float] | np.ndarray, n_bins: int
) -> tuple[np.ndarray, np.ndarray]:
    """Min/max envelope of a trace for drawing: a polyline through each bin's extremes.

    The time range is cut into ``n_bins`` equal bins; each bin contributes its minimum and
    maximum sample (at their own times, in time order), so a single-sample spike is kept,
    unlike stride decimation. Bins without a finite sample become NaN points, so gaps stay
    visible as breaks in the line. Traces of at most ``2 * n_bins`` samples are returned as
    they are, with NaN breaks inserted where the time step exceeds 3x its median (a gap in
    the time stamps). Infinite values count as missing.

    Returns (t, y) arrays of equal length (``2 * n_bins`` when reduced).
    """
    t = np.asarray(t, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if t.ndim != 1 or t.shape != y.shape:
        raise ValueError(f"t and y must be 1-D of equal length, got {t.shape} and {y.shape}")
    if n_bins < 1:
        raise ValueError(f"n_bins must be at least 1, got {n_bins}")
    keep = np.isfinite(t)
    t, y = t[keep], np.where(np.isinf(y[keep]), np.nan, y[keep])
    if t.size < 2 or t.size <= 2 * n_bins or t[-1] == t[0]:
        if t.size < 3:
            return t, y
        dt = np.diff(t)
        jumps = np.flatnonzero(dt > 3.0 * np.median(dt)) + 1
        return (np.insert(t, jumps, np.nan), np.insert(y, jumps, np.nan))

    t0, t1 = float(t.min()), float(t.max())
    width = (t1 - t0) / n_bins
    b = np.minimum(((t - t0) / width).astype(np.intp), n_bins - 1)
    good = ~np.isnan(y)
    bg, tg, yg = b[good], t[good], y[good]
    order = np.lexsort((yg, bg))  # by bin, then by value within the bin
    bs = bg[order]
    edge = bs[1:] != bs[:-1]
    first = order[np.r_[True, edge]] if bs.size else order[:0]
    last = order[np.r_[edge, True]] if bs.size else order[:0]
    bins = bg[first]
    early = np.where(tg[first] <= tg[last], first, last)
    late = np.where(tg[first] <= tg[last], last, first)

    out_t = np.repeat(t0 + (np.arange(n_bins) + 0.5) * width, 2).reshape(n_bins, 2)
    out_y = np.full((n_bins, 2), np.nan)
    out_t[bins, 0], out_y[bins, 0] = tg[early], yg[early]
    out_t[bins, 1], out_y[bins, 1] = tg[late], yg[late]
    return out_t.ravel(), out_y.ravel()


def robust_limits(
    values: np.ndarray,
    percentiles: tuple[float, float] = Y_PERCENTILES,
    pad: float = 0.08,
    min_span: float = 0.02,
) -> tuple[float, float]:
    """Axis limits from robust percentiles of the finite values, padded by ``pad`` of the span.

    A span narrower than ``min_span`` is widened about its centre, so a flat trace is not
    magnified into noise. Returns (0.9, 1.1) when no value is finite.
    """
    v = np.asarray(values, dtype=np.float64)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return 0.9, 1.1
    lo, hi = np.percentile(v, percentiles)
    if hi - lo < min_span:
        mid = 0.5 * (lo + hi)
        lo, hi = mid - 0.5 * min_span, mid + 0.5 * min_span
    span = hi - lo
    return float(lo - pad * span), float(hi + pad * span)


def _provenance(res: ResultFile) -> tuple[str, str]:
    """(run name, one-line provenance) for the title block, from the root attributes."""
    a = res.attrs
    source = str(a.get("source_file", "") or "")
    run = str(
        a.get("run_name")
        or (Path(source).stem if source else "")
        or (res.path.stem if res.path else "unnamed run")
    )
    if res.start_time is not None:
        when = f"run started {res.start_time:%Y-%m-%d %H:%M} UTC"
    elif a.get("created_utc"):
        when = f"processed {str(a['created_utc'])[:10]} (run start time unknown)"
    else:
        when = "run date unknown"
    fuel = a.get("fuel_name") or a.get("fuel_preset")
    if not fuel and isinstance(a.get("fuel"), dict):
        fuel = a["fuel"].get("name")
    config = a.get("config_name") or a.get("config_file")
    parts = [when, f"fuel: {fuel or 'unknown'}"]
    parts.append(f"config: {Path(str(config)).name if config else 'unknown'}")
    if source:
        sha = str(a.get("source_sha256", "") or "")
        parts.append(f"source: {Path(source).name}" + (f" (sha256 {sha[:12]})" if sha else ""))
    parts.append(f"dynoqc {a.get('tool_version', '?')}")
    return run, "   |   ".join(parts)


def bin_mean(t: np.ndarray, y: np.ndarray, n_bins: int) -> tuple[np.ndarray, np.ndarray]:
    """Mean of the finite samples in each of ``n_bins`` equal time bins (the bins of
    :func:`envelope`); bins without a finite sample are NaN, so gaps stay breaks.

    Returns (bin centres, bin means).
    """
    t = np.asarray(t, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    keep = np.isfinite(t)
    t, y = t[keep], y[keep]
    if t.size == 0:
        return np.full(n_bins, np.nan), np.full(n_bins, np.nan)
    t0, t1 = float(t.min()), float(t.max())
    width = (t1 - t0) / n_bins if t1 > t0 else 1.0
    b = np.minimum(((t - t0) / width).astype(np.intp), n_bins - 1)
    good = np.isfinite(y)
    count = np.bincount(b[good], minlength=n_bins)
    total = np.bincount(b[good], weights=y[good], minlength=n_bins)
    with np.errstate(invalid="ignore", divide="ignore"):  # empty bins: 0/0 -> NaN on purpose
        mean = np.where(count > 0, total / count, np.nan)
    return t0 + (np.arange(n_bins) + 0.5) * width, mean


def _time_axis(res: ResultFile, axes: Sequence[Axes]) -> tuple[np.ndarray, Any]:
    """x values for the night and a converter from seconds; sets the x label and ticks."""
    t = res.timeseries["time"].to_numpy(dtype=np.float64)
    ax = axes[-1]
    if res.start_time is not None:
        day0 = mdates.date2num(res.start_time.replace(tzinfo=None))

        def conv(s: np.ndarray) -> np.ndarray:
            return day0 + np.asarray(s, dtype=np.float64) / 86400.0

        locator = mdates.AutoDateLocator(minticks=6, maxticks=14)
        ax.xaxis.set_major_locator(locator)
        ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator, show_offset=False))
        ax.set_xlabel("time of night, UTC (hh:mm; date shown at midnight)")
    else:

        def conv(s: np.ndarray) -> np.ndarray:
            return np.asarray(s, dtype=np.float64) / 3600.0

        ax.set_xlabel("time since start of run (h)")
    return conv(t), conv


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
    char = 0.0058 * (x_range[1] - x_range[0])  # width of one 7 pt character on this axes
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
    ex, ey = envelope(x, v, n_bins)
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


def plot_lambda_overview(res: ResultFile, out_png: Path) -> Path:
    """The night's lambda estimates against time, with flagged intervals; writes a PNG.

    Draws ``lambda_flow``, ``lambda_carbon``, ``lambda_oxygen`` and ``lambda_sensor`` (each
    only when present in the result). Long traces are drawn as their min/max envelope (light,
    keeps every spike) with the bin mean on top (colour and line style per estimate). Flags
    ``analyzer_not_sampling`` and ``data_gap`` are grey hatched spans; other flags are tinted
    by severity and labelled "check: suspect" in a strip above the plot. The y range follows
    robust percentiles; samples beyond it are marked with triangles at the axis edge. The x
    axis is clock time (UTC) when the start of the run is known, else hours since start.
    Built from the read-back result only. Returns ``out_png`` (1800 x 900 px).
    """
    out_png = Path(out_png)
    flags = res.flags
    labelled = flags[~flags["check"].astype(str).isin(list(SPAN_STYLE))] if len(flags) else flags
    with style.context(style_path()):
        fig = Figure(figsize=FIGSIZE, dpi=DPI, layout="constrained")
        FigureCanvasAgg(fig)
        if len(labelled):
            rows = int(min(FLAG_LANES, len(labelled)))
            strip, ax = fig.subplots(
                2, 1, sharex=True, gridspec_kw={"height_ratios": [0.6 + 0.5 * rows, 10]}
            )
            axes: list[Axes] = [strip, ax]
        else:
            ax = fig.add_subplot()
            axes = [ax]
        x, conv = _time_axis(res, axes)
        finite_x = x[np.isfinite(x)]
        x_range = (float(finite_x.min()), float(finite_x.max())) if finite_x.size else (0.0, 1.0)
        if x_range[1] <= x_range[0]:
            x_range = (x_range[0], x_range[0] + 1.0)
        n_bins = max(1, int(BINS_PER_PIXEL * FIGSIZE[0] * DPI))

        present = [
            n
            for n in LAMBDA_SERIES
            if n in res.timeseries.columns
            and np.isfinite(res.timeseries[n].to_numpy(dtype=np.float64)).any()
        ]
        values = [res.timeseries[n].to_numpy(dtype=np.float64) for n in present]
        ylim = robust_limits(np.concatenate(values) if values else np.array([]))

        handles: list[Any] = []
        beyond = False
        for name, v in zip(present, values, strict=True):
            h, b = _draw_series(ax, x, v, name, res.units.get(name, "1"), n_bins, ylim)
            handles += h
            beyond |= b
        if beyond:
            handles.append(
                Line2D(
                    [],
                    [],
                    linestyle="none",
                    marker="^",
                    color="#555555",
                    markersize=5,
                    label="value beyond the y range (at edge)",
                )
            )
        if any(v.size > 2 * n_bins for v in values):
            handles.append(
                Patch(
                    facecolor="#bbbbbb",
                    alpha=0.6,
                    label="light band: min-max within each plotted interval",
                )
            )
        if ylim[0] < 1.0 < ylim[1]:
            ax.axhline(1.0, color="#444444", linewidth=0.7, linestyle=(0, (2, 3)), zorder=1)
            handles.append(
                Line2D(
                    [],
                    [],
                    color="#444444",
                    linewidth=0.7,
                    linestyle=(0, (2, 3)),
                    label="lambda = 1 (stoichiometric)",
                )
            )
        handles += _shade_flags(ax, flags, conv, x_range)
        if len(labelled):
            handles += _flag_strip(axes[0], labelled, conv, x_range, rows)

        if not present:
            ax.text(
                0.5,
                0.5,
                "no lambda estimate in this result file",
                transform=ax.transAxes,
                ha="center",
                va="center",
                fontsize=12,
                color="#444444",
            )
        ax.set_xlim(*x_range)
        ax.set_ylim(*ylim)
        ax.set_ylabel("lambda (-)")
        run, prov = _provenance(res)
        fig.suptitle(f"Lambda estimates over the night \u2014 {run}", x=0.01, ha="left")
        axes[0].set_title(prov, loc="left", fontsize=8, color="#333333")
        if handles:
            fig.legend(handles=handles, loc="outside lower center", ncols=min(4, len(handles)))
        fig.savefig(out_png, dpi=DPI, metadata={"Software": None})
    return out_png


__all__ = ["bin_mean", "envelope", "plot_lambda_overview", "robust_limits", "style_path"]
