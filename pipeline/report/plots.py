"""Shared helpers of the report figures (one module per figure builds on these).

Figures are made with :class:`matplotlib.figure.Figure` on the Agg canvas (no pyplot global
state), at a fixed size and dpi with constrained layout, in the packaged style
``pipeline/data/dynoqc.mplstyle`` (ECOSYSTEM.md §6). Every figure has the same title block
(:func:`report_figure`): title, then run name, date, fuel, config, tool version and the short
hash of the source file. Long traces are drawn through a min/max :func:`envelope`, so
single-sample spikes survive and drawing stays fast. A figure that cannot be made raises
:class:`FigureSkipped` with the reason, before anything is drawn (never an empty axes).
"""

from __future__ import annotations

import gc
import struct
import zlib
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from importlib import resources
from pathlib import Path
from typing import Any

import matplotlib.dates as mdates
import numpy as np
from matplotlib import style
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure, SubFigure

from ..atomic import atomic_path
from ..result import ResultFile, provenance

#: The lambda estimates, in drawing order.
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
        "label": "lambda_carbon (carbon balance)",
    },
    "lambda_oxygen": {
        "color": "#009E73",
        "linestyle": "-.",
        "label": "lambda_oxygen (oxygen balance)",
    },
    "lambda_sensor": {"color": "#000000", "linestyle": ":", "label": "lambda_sensor (wide-band)"},
}

#: Time-of-night colour map for scatter plots: viridis (colour-blind safe, lightness rises
#: monotonically, so early/late also separate in grey print).
TIME_CMAP = "viridis"

#: Shading of flagged intervals: checks that say "no usable exhaust data here" get their own
#: grey tone and hatch; every other check is shaded by severity and labelled.
SPAN_STYLE: dict[str, dict[str, Any]] = {
    "analyzer_not_sampling": {
        "facecolor": "#d0d0d0",
        "hatch": "////",
        "edgecolor": "#707070",
        "label": "analyzers not sampling",
    },
    "data_gap": {
        "facecolor": "#f2f2f2",
        "hatch": "xx",
        "edgecolor": "#909090",
        "label": "data gap",
    },
    "engine_off": {
        "facecolor": "#e4e4e4",
        "hatch": "..",
        "edgecolor": "#808080",
        "label": "engine off",
    },
}
SEVERITY_STYLE: dict[str, dict[str, Any]] = {
    "error": {"facecolor": "#f4a582", "label": "flagged: error"},
    "warning": {"facecolor": "#fddbc7", "label": "flagged: warning"},
    "info": {"facecolor": "#e8e8f4", "label": "flagged: info"},
}

#: Figure width [in] and resolution [dpi]: 1600 px wide; pasted at A4 text width (16 cm) the
#: 9 pt tick labels print at about 7 pt.
WIDTH_IN = 8.0
DPI = 200

#: Default figure size [in] (overview): 1600 x 960 px.
FIGSIZE = (WIDTH_IN, 4.8)

#: Height of the title block [in].
TITLE_BLOCK_IN = 0.62

#: Bins per pixel of figure width for bin means of long traces (smooth styled lines).
BINS_PER_PIXEL = 2.5

#: Min/max envelope bins per pixel of figure width (per column of panels): one bin per pixel
#: column keeps every extreme and draws the same band as finer bins, at a fraction of the
#: cost (drawing a long translucent polyline is the slowest part of a figure).
ENVELOPE_BINS_PER_PIXEL = 1.0

#: Percentiles [%] that set the y range, so one spike does not squash the night.
Y_PERCENTILES = (0.5, 99.5)

#: Lanes of the flag strip above the plot.
FLAG_LANES = 3




class FigureSkipped(Exception):
    """A figure cannot be made from this result (e.g. a channel was not logged).

    The message is one plain sentence for the summary's list of skipped figures.
    """


@contextmanager
def _gc_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector while a figure is built and drawn.

    A figure allocates some 10^4-10^5 small objects; with the collector on, they trigger
    repeated collections that scan the growing figure, and full ones that scan every object
    of the process (some 10 % of a night's figure time). Paused, the figure is built without
    them and its objects are freed together once it is dropped. The previous state is
    restored on exit (also on error).
    """
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


@contextmanager
def report_figure(
    res: ResultFile, title: str, height_in: float, caption: str = ""
) -> Iterator[SubFigure]:
    """A report figure in the packaged style: yields the body (a SubFigure) to draw on.

    The figure is ``WIDTH_IN`` x ``height_in`` inches at ``DPI``; the title block on top holds
    ``title - run name``, the provenance line and an optional one-line ``caption``. The
    figure is kept on ``body.figure``; save it with :func:`save` inside the ``with`` block.

    The cyclic garbage collector is paused inside the block (see :func:`_gc_paused`).
    """
    with _gc_paused(), style.context(style_path()):
        fig = Figure(figsize=(WIDTH_IN, height_in), dpi=DPI, layout="constrained")
        FigureCanvasAgg(fig)
        block = TITLE_BLOCK_IN + (0.17 if caption else 0.0)
        top, body = fig.subfigures(2, 1, height_ratios=[block, height_in - block])
        run, prov = provenance(res)
        y = 1.0 - 0.05 / block
        top.text(0.006, y, f"{title} \u2014 {run}", fontsize=12, weight="bold", va="top")
        top.text(0.006, y - 0.30 / block, prov, fontsize=7.5, color="#333333", va="top")
        if caption:
            top.text(0.006, y - 0.47 / block, caption, fontsize=7.5, color="#333333",
                     va="top", style="italic")
        yield body


def save(body: SubFigure | Figure, out_png: Path) -> Path:
    """Write the figure of ``body`` as PNG (:func:`finish`); return the path."""
    out_png = Path(out_png)
    finish(body, out_png)
    return out_png


def finish(body: SubFigure | Figure, out_png: Path | None = None) -> Figure:
    """Lay out and draw the figure of ``body``; write it as PNG without a software tag
    (byte-reproducible) when ``out_png`` is given; return the :class:`Figure`.

    The same picture as ``savefig``, faster: the constrained layout is computed once and the
    figure drawn once (``savefig`` adds a full draw pass for the layout), and the PNG is
    written by :func:`write_png` (fast zlib, no filter search).
    """
    fig = body.figure
    engine = fig.get_layout_engine()
    if engine is not None:
        engine.execute(fig)
        fig.set_layout_engine("none")  # laid out: the draw must not redo it
    canvas = fig.canvas
    if not isinstance(canvas, FigureCanvasAgg):
        canvas = FigureCanvasAgg(fig)
    canvas.draw()
    if out_png is not None:
        with atomic_path(Path(out_png)) as tmp:
            write_png(tmp, np.asarray(canvas.buffer_rgba()), fig.dpi)
    return fig


#: zlib level of the figure PNGs. Level 3 without row filters writes a report figure about
#: four times faster than the usual PNG encoder (level 6, adaptive row filters); the files
#: are about 10 % larger.
PNG_ZLIB_LEVEL = 3


def write_png(path: Path, rgba: np.ndarray, dpi: float) -> Path:
    """Write an 8-bit RGBA image (rows top to bottom) as PNG with its resolution (pHYs) and no
    other metadata. Filter type 0 on every row and one IDAT chunk: plain, deterministic."""
    rgba = np.asarray(rgba, dtype=np.uint8)
    if rgba.ndim != 3 or rgba.shape[2] != 4:
        raise ValueError(f"expected an (h, w, 4) RGBA array, got shape {rgba.shape}")
    h, w, _ = rgba.shape
    rows = np.zeros((h, 1 + 4 * w), dtype=np.uint8)  # leading 0: filter type "none"
    rows[:, 1:] = rgba.reshape(h, 4 * w)

    def chunk(kind: bytes, data: bytes) -> bytes:
        crc = zlib.crc32(kind + data) & 0xFFFFFFFF
        return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", crc)

    ppm = int(dpi / 0.0254 + 0.5)  # pixels per metre
    with open(path, "wb") as f:
        f.write(b"\x89PNG\r\n\x1a\n")
        f.write(chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 6, 0, 0, 0)))
        f.write(chunk(b"pHYs", struct.pack(">IIB", ppm, ppm, 1)))
        f.write(chunk(b"IDAT", zlib.compress(rows, PNG_ZLIB_LEVEL)))
        f.write(chunk(b"IEND", b""))
    return Path(path)


def night_x(res: ResultFile) -> tuple[Any, str, bool]:
    """(converter from seconds to x, x label, is clock time) for the time axis of the night.

    Clock time (matplotlib date numbers, UTC) when the start of the run is known, else hours
    since the start.
    """
    if res.start_time is not None:
        day0 = mdates.date2num(res.start_time.replace(tzinfo=None))

        def conv(s: Any) -> Any:
            return day0 + np.asarray(s, dtype=np.float64) / 86400.0

        return conv, "time of night, UTC (hh:mm)", True

    def hours(s: Any) -> Any:
        return np.asarray(s, dtype=np.float64) / 3600.0

    return hours, "time since start of run (h)", False


class _TimeLocator(mdates.AutoDateLocator):
    """:class:`~matplotlib.dates.AutoDateLocator` that remembers its ticks for the last view
    range: the layout and the draw ask for the ticks of every time axis many times (once per
    shared axis and layout pass), and the answer depends on the view range only."""

    _view: tuple[float, ...] | None = None
    _ticks: Any = None

    def __call__(self) -> Any:
        view = tuple(self.axis.get_view_interval()) if self.axis is not None else None
        if view is None or view != self._view:
            self._ticks, self._view = super().__call__(), view
        return self._ticks


class _TimeFormatter(mdates.ConciseDateFormatter):
    """:class:`~matplotlib.dates.ConciseDateFormatter` that remembers the labels of the last
    set of ticks (they depend on the ticks only)."""

    _values: tuple[float, ...] | None = None
    _labels: tuple[str, ...] = ()

    def format_ticks(self, values: Any) -> list[str]:
        key = tuple(values)
        if key != self._values:
            self._labels, self._values = tuple(super().format_ticks(values)), key
        return list(self._labels)


def format_time_axis(
    res: ResultFile, ax: Axes, *, label: bool = True, maxticks: int = 12
) -> None:
    """Clock-time ticks (``hh:mm``, date at midnight) or hours on the x axis of ``ax``."""
    _, xlabel, is_clock = night_x(res)
    if is_clock:
        locator = _TimeLocator(minticks=3, maxticks=maxticks)
        ax.xaxis.set_major_locator(locator)
        ax.xaxis.set_major_formatter(_TimeFormatter(locator, show_offset=False))
    if label:
        ax.set_xlabel(xlabel)


def time_colorbar(res: ResultFile, parent: Any, mappable: Any, ax: Any) -> Any:
    """A colour bar for a time-of-night colour scale, ticked in clock time or hours."""
    _, _, is_clock = night_x(res)
    if is_clock:
        cb = parent.colorbar(mappable, ax=ax, ticks=mdates.HourLocator(interval=2),
                             format=mdates.DateFormatter("%H:%M"), pad=0.01, aspect=30)
        cb.set_label("time of night, UTC")
    else:
        cb = parent.colorbar(mappable, ax=ax, pad=0.01, aspect=30)
        cb.set_label("time since start of run (h)")
    return cb


def style_path() -> Path:
    """Path of the packaged matplotlib style file ``dynoqc.mplstyle``."""
    return Path(str(resources.files("pipeline") / "data" / "dynoqc.mplstyle"))


def _bin_extremes_any(b: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per occupied bin (ascending): index of its minimum (earliest of ties) and of its
    maximum (latest of ties); any order of ``b``."""
    order = np.lexsort((y, b))  # by bin, then by value within the bin (stable)
    bs = b[order]
    edge = bs[1:] != bs[:-1]
    if not bs.size:
        return order[:0], order[:0]
    return order[np.r_[True, edge]], order[np.r_[edge, True]]


def _runs(b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start of each run of equal values in ``b`` and, per element, the number of its run."""
    start = np.flatnonzero(np.r_[True, b[1:] != b[:-1]])
    return start, np.repeat(np.arange(start.size), np.diff(np.r_[start, b.size]))


def _bin_extremes_sorted(b: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """As :func:`_bin_extremes_any` for non-decreasing ``b`` (time-ordered samples), but NaN in
    ``y`` allowed (never picked): each bin is a contiguous run, reduced with ``reduceat``
    instead of a sort (same result)."""
    start, run = _runs(b)
    with np.errstate(invalid="ignore"):  # all-NaN bins reduce to NaN and match nothing
        pos_min = np.flatnonzero(y == np.fmin.reduceat(y, start)[run])
        pos_max = np.flatnonzero(y == np.fmax.reduceat(y, start)[run])
    if not pos_min.size:
        return pos_min, pos_max
    k = run[pos_min]
    first = pos_min[np.r_[True, k[1:] != k[:-1]]]
    k = run[pos_max]
    last = pos_max[np.r_[k[1:] != k[:-1], True]]
    return first, last


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
    if not keep.all():
        t, y = t[keep], y[keep]
    if np.isinf(y).any():
        y = np.where(np.isinf(y), np.nan, y)
    if t.size < 2 or t.size <= 2 * n_bins or t[-1] == t[0]:
        if t.size < 3:
            return t, y
        dt = np.diff(t)
        jumps = np.flatnonzero(dt > 3.0 * np.median(dt)) + 1
        return (np.insert(t, jumps, np.nan), np.insert(y, jumps, np.nan))

    t0, t1 = float(t.min()), float(t.max())
    width = (t1 - t0) / n_bins
    b = np.minimum(((t - t0) / width).astype(np.intp), n_bins - 1)
    if bool(np.all(b[1:] >= b[:-1])):  # time-ordered: no sort, no copy of the samples
        tg, yg = t, y
        first, last = _bin_extremes_sorted(b, y)
        bins = b[first]
    else:
        good = ~np.isnan(y)
        bg, tg, yg = b[good], t[good], y[good]
        first, last = _bin_extremes_any(bg, yg)
        bins = bg[first]
    early = np.where(tg[first] <= tg[last], first, last)
    late = np.where(tg[first] <= tg[last], last, first)

    out_t = np.repeat(t0 + (np.arange(n_bins) + 0.5) * width, 2).reshape(n_bins, 2)
    out_y = np.full((n_bins, 2), np.nan)
    out_t[bins, 0], out_y[bins, 0] = tg[early], yg[early]
    out_t[bins, 1], out_y[bins, 1] = tg[late], yg[late]
    return out_t.ravel(), out_y.ravel()


def envelope_bins(n_samples: int, width_px: float) -> int:
    """Envelope bins for a trace of ``n_samples`` drawn across ``width_px`` pixels of figure
    width: :data:`ENVELOPE_BINS_PER_PIXEL` per pixel; a trace short enough to be drawn as it
    is at :data:`BINS_PER_PIXEL` (at most two samples per such bin) keeps that finer count,
    so :func:`envelope` returns it unreduced."""
    fine = max(1, int(BINS_PER_PIXEL * width_px))
    return fine if n_samples <= 2 * fine else max(1, int(ENVELOPE_BINS_PER_PIXEL * width_px))


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


def bin_mean(t: np.ndarray, y: np.ndarray, n_bins: int) -> tuple[np.ndarray, np.ndarray]:
    """Mean of the finite samples in each of ``n_bins`` equal time bins (the bins of
    :func:`envelope`); bins without a finite sample are NaN, so gaps stay breaks.

    Returns (bin centres, bin means).
    """
    t = np.asarray(t, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    keep = np.isfinite(t)
    if not keep.all():
        t, y = t[keep], y[keep]
    if t.size == 0:
        return np.full(n_bins, np.nan), np.full(n_bins, np.nan)
    t0, t1 = float(t.min()), float(t.max())
    width = (t1 - t0) / n_bins if t1 > t0 else 1.0
    b = np.minimum(((t - t0) / width).astype(np.intp), n_bins - 1)
    good = np.isfinite(y)
    if bool(np.all(b[1:] >= b[:-1])):  # time-ordered: sum contiguous runs
        start = np.flatnonzero(np.r_[True, b[1:] != b[:-1]])
        count = np.zeros(n_bins, dtype=np.int64)
        total = np.zeros(n_bins)
        count[b[start]] = np.add.reduceat(good, start, dtype=np.int64)
        total[b[start]] = np.add.reduceat(np.where(good, y, 0.0), start)
    else:
        count = np.bincount(b[good], minlength=n_bins)
        total = np.bincount(b[good], weights=y[good], minlength=n_bins)
    with np.errstate(invalid="ignore", divide="ignore"):  # empty bins: 0/0 -> NaN on purpose
        mean = np.where(count > 0, total / count, np.nan)
    return t0 + (np.arange(n_bins) + 0.5) * width, mean



__all__ = [
    "BINS_PER_PIXEL",
    "ENVELOPE_BINS_PER_PIXEL",
    "FigureSkipped",
    "bin_mean",
    "envelope",
    "envelope_bins",
    "format_time_axis",
    "night_x",
    "provenance",
    "report_figure",
    "robust_limits",
    "save",
    "style_path",
    "time_colorbar",
    "write_png",
]
