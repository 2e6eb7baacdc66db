"""Time alignment of the analyzer channels onto the flow signals.

Analyzer readings arrive later than the flow-meter readings: sample-line transport plus the
analyzer's own response, the t50 of 40 CFR 1065.308 (REFERENCES 1.12, which also says to shift
each concentration back by its t50 before combining it with flows). The delay is estimated from
the night's own transients: the exhaust CO2 rises and O2 falls with the fuel/air ratio
``fuel_mass_flow / air_mass_flow``, so the cross-correlation of the time derivatives of the
fuel/air ratio and of each analyzer signal peaks at the delay. Derivatives (of lightly smoothed
signals) are used because they are zero at steady points and carry the timing of the changes,
not the operating-point levels (common practice in signal alignment).

Quality is the normalised peak height |rho| (the correlation coefficient of the two
derivative series at the best lag, 0..1). The night's estimate is used when it holds at least
``alignment_min_transients`` transients and the quality reaches ``alignment_min_quality``;
otherwise the configured delay (``[sampling] analyzer_delay_s``) or the documented default.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from .checks.settings import CheckSettings, resolve_settings
from .checks.timebase import mask_runs, median_step
from .quantities import GASES
from .records import with_columns

#: Part of the cross-correlation maximum above which the peak's centre is taken.
PEAK_FRACTION = 0.8

#: Channels whose estimates set the common delay; the others get their own delay only when
#: their own cross-correlation is good enough.
PRIMARY_CHANNELS = ("co2", "o2")


def _to_grid(time: np.ndarray, x: np.ndarray, grid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Linear interpolation onto ``grid``: values, and a mask of the valid grid points."""
    ok = np.isfinite(x) & np.isfinite(time)
    if ok.sum() < 2:
        return np.zeros_like(grid), np.zeros(grid.shape, dtype=bool)
    values = np.interp(grid, time[ok], x[ok])
    bad = np.interp(grid, time, (~ok).astype(float)) > 0.0
    return values, ~bad


def _smoothed_derivative(
    x: np.ndarray, valid: np.ndarray, step: float, smooth_s: float
) -> np.ndarray:
    """Derivative of a moving average; zero where the window touches invalid samples."""
    n = max(1, int(round(smooth_s / step)))
    kernel = np.ones(n) / n
    xs = np.convolve(np.where(valid, x, 0.0), kernel, mode="same")
    cover = np.convolve(valid.astype(float), kernel, mode="same")
    d = np.gradient(xs, step)
    good = cover > 1.0 - 1e-9
    good[1:] &= good[:-1]
    good[:-1] &= good[1:]
    return np.where(good, d, 0.0)


def next_fast_len(n: int) -> int:
    """The smallest 5-smooth number (2^a 3^b 5^c) >= ``n``: a length the FFT handles fast."""
    best = 1 << max(0, (n - 1).bit_length())  # the next power of two bounds the search
    p5 = 1
    while p5 < best:
        p35 = p5
        while p35 < best:
            m = p35 << max(0, (-(-n // p35) - 1).bit_length())  # p35 * 2^k >= n, k smallest
            best = min(best, m)
            p35 *= 3
        p5 *= 5
    return best


def correlate_full(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Full cross-correlation of 1-D float arrays ``a`` and ``b`` by FFT, lags
    ``-(b.size - 1) .. a.size - 1``.

    The computation of ``scipy.signal.correlate(a, b, mode="full", method="fft")`` (convolution
    with the reversed ``b``, real FFTs zero-padded to a fast length), written against
    :mod:`numpy.fft` so that this module imports no part of SciPy (``scipy.signal`` costs about
    1 s of start-up, ``scipy.fft`` about 0.1 s, for every ``dynoqc process``). Same values to
    rounding.
    """
    n = a.size + b.size - 1
    nfft = next_fast_len(n)
    spec = np.fft.rfft(a, nfft) * np.fft.rfft(b[::-1], nfft)
    return np.fft.irfft(spec, nfft)[:n]


def cross_correlation_delay(
    reference: np.ndarray, delayed: np.ndarray, step: float, max_delay_s: float
) -> tuple[float, float]:
    """Delay [s] of ``delayed`` behind ``reference`` and the normalised peak height |rho|.

    Both inputs are uniformly sampled derivative series of equal length. The lag search covers
    0..``max_delay_s``; the peak of |rho| is refined below one step by a parabola through the
    three points around it (common practice). A peak on the search edge gets quality 0.
    """
    norm = np.sqrt(np.sum(reference**2) * np.sum(delayed**2))
    if not np.isfinite(norm) or norm == 0.0:
        return float("nan"), 0.0
    corr = correlate_full(delayed, reference) / norm
    lags = np.arange(-(reference.size - 1), delayed.size)  # signal.correlation_lags, "full"
    max_lag = int(np.ceil(max_delay_s / step))
    # The peak is searched in 0..max_lag; its centre is measured on -max_lag..max_lag, so a
    # broad peak near zero delay is not cut in half by the search edge.
    window = (lags >= -max_lag) & (lags <= max_lag)
    c = np.abs(corr[window])
    lag = lags[window]
    search = lag >= 0
    i = int(np.flatnonzero(search)[np.argmax(c[search])])
    quality = float(c[i])
    if i == c.size - 1:  # on the search edge: the true peak may lie beyond it
        return float(lag[i] * step), 0.0
    # Centre of the peak: the weighted centroid of the contiguous stretch above
    # PEAK_FRACTION of the maximum. Long ramps give broad, nearly flat-topped peaks whose
    # maximum noise moves by seconds; their centre stays put (a parabola through the three top
    # points is what a sharp peak would need, and the centroid gives the same there).
    top = c >= PEAK_FRACTION * quality
    lo = i - int(np.argmin(top[i::-1])) + 1 if not top[: i + 1].all() else 0
    hi = i + int(np.argmin(top[i:])) if not top[i:].all() else c.size
    w = c[lo:hi] - PEAK_FRACTION * quality
    centre = float(np.sum(w * lag[lo:hi]) / np.sum(w)) if np.sum(w) > 0 else float(lag[i])
    return centre * step, quality


def transient_mask(ratio: np.ndarray, valid: np.ndarray, step: float, settings: dict) -> np.ndarray:
    """Grid points where the fuel/air ratio is changing fast enough to count as a transient
    (see module docstring)."""
    med = np.median(ratio[valid]) if valid.any() else 0.0
    if not np.isfinite(med) or med <= 0:
        return np.zeros(ratio.shape, dtype=bool)
    d = _smoothed_derivative(ratio, valid, step, settings["alignment_transient_window_s"])
    return (
        np.abs(d) * settings["alignment_transient_window_s"]
        > settings["alignment_transient_fraction"] * med
    )


def count_transients(ratio: np.ndarray, valid: np.ndarray, step: float, settings: dict) -> int:
    """Number of separate transients of the fuel/air ratio (see module docstring)."""
    runs = mask_runs(transient_mask(ratio, valid, step, settings))
    if len(runs) == 0:
        return 0
    # transients closer than 10 s are one transient
    gaps = runs[1:, 0] - runs[:-1, 1]
    return int(1 + np.sum(gaps * step > 10.0))


def _dilate(mask: np.ndarray, pad: int) -> np.ndarray:
    """``mask`` widened by ``pad`` grid points on both sides (vectorised)."""
    if pad <= 0 or not mask.any():
        return mask
    counts = np.convolve(mask.astype(np.int64), np.ones(2 * pad + 1, dtype=np.int64), "same")
    return counts > 0


def estimate_delays(
    frame: pd.DataFrame, gas_columns: list[str], settings: dict
) -> tuple[dict[str, float], dict[str, float], int]:
    """Per-channel delay [s] and quality from the fuel/air-ratio cross-correlation.

    For a ramp-like change through an analyzer with a first-order response, the peak of the
    derivative cross-correlation sits at the delay plus tau ln 2, i.e. at the t50 of
    40 CFR 1065.308 (REFERENCES 1.12) [D].

    Returns ``(delays, qualities, transients)``; channels that cannot be estimated get NaN.
    """
    time = frame["time"].to_numpy(dtype=float)
    delays = {c: float("nan") for c in gas_columns}
    quality = {c: 0.0 for c in gas_columns}
    if not {"fuel_mass_flow", "air_mass_flow"} <= set(frame.columns) or len(time) < 10:
        return delays, quality, 0
    step = max(median_step(time), settings["alignment_grid_s"])
    t_ok = time[np.isfinite(time)]
    grid = np.arange(t_ok.min(), t_ok.max(), step)
    if grid.size < 10:
        return delays, quality, 0
    fuel = frame["fuel_mass_flow"].to_numpy(dtype=float)
    air = frame["air_mass_flow"].to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(air > 0, fuel / air, np.nan)
    ratio_g, ratio_ok = _to_grid(time, ratio, grid)
    if "analyzer_mode" in frame:
        mode_g, _ = _to_grid(time, frame["analyzer_mode"].to_numpy(dtype=float), grid)
        sampling = np.abs(mode_g) < 0.5
    else:
        sampling = np.ones(grid.shape, dtype=bool)
    transients = count_transients(ratio_g, ratio_ok, step, settings)
    d_ref = _smoothed_derivative(ratio_g, ratio_ok, step, settings["alignment_smooth_s"])
    # Only the stretches around transients carry information on the delay; elsewhere the
    # derivatives are meter and analyzer noise that would bury the peak (on a night with few
    # transients, e.g. a stoichiometric engine whose fuel/air ratio rarely moves). The window
    # is widened by the longest delay searched, so the analyzers' answer lies inside it.
    pad = int(np.ceil((settings["alignment_max_delay_s"] + settings["alignment_smooth_s"]) / step))
    around = _dilate(transient_mask(ratio_g, ratio_ok, step, settings), pad)
    if around.any():
        d_ref = np.where(around, d_ref, 0.0)
    for col in gas_columns:
        if col not in frame:
            continue
        x_g, x_ok = _to_grid(time, frame[col].to_numpy(dtype=float), grid)
        d_x = _smoothed_derivative(x_g, x_ok & sampling, step, settings["alignment_smooth_s"])
        if around.any():
            d_x = np.where(around, d_x, 0.0)
        # the reference counts only where the analyzer samples, so zero/span periods add nothing
        d_r = np.where(d_x != 0.0, d_ref, 0.0)
        delays[col], quality[col] = cross_correlation_delay(
            d_r, d_x, step, settings["alignment_max_delay_s"]
        )
    return delays, quality, transients


def shift_earlier(time: np.ndarray, values: np.ndarray, delay_s: float) -> np.ndarray:
    """Value at ``t`` taken from ``t + delay_s`` by linear interpolation; the tail becomes NaN."""
    time = np.asarray(time, dtype=float)
    values = np.asarray(values, dtype=float)
    if delay_s == 0.0:
        return values.copy()
    if np.all(np.diff(time) > 0):
        return np.interp(time + delay_s, time, values, left=np.nan, right=np.nan)
    # time not increasing (resets, duplicates): shift by whole samples of the median step
    k = int(round(delay_s / median_step(time)))
    out = np.full(values.shape, np.nan)
    if k < values.size:
        out[: values.size - k] = values[k:]
    return out


@dataclass(frozen=True)
class Alignment:
    """What the alignment stage found: the delay applied [s], how it was found
    (``cross-correlation`` | ``configured`` | ``default``) and every attribute of the
    ``/alignment`` group (:func:`align_analyzers`)."""

    delay_s: float
    method: str
    attrs: dict[str, Any]


def align(
    frame: pd.DataFrame, settings: CheckSettings
) -> tuple[pd.DataFrame, Alignment]:
    """The alignment stage: every logged analyzer channel shifted by the night's transport
    delay (:func:`align_analyzers`; the configured ``analyzer_delay_s`` is the fallback)."""
    gases = [g for g in GASES if g in frame]
    out, attrs = align_analyzers(frame, gases, settings, settings.analyzer_delay_s)
    return out, Alignment(float(attrs["analyzer_delay_s"]), str(attrs["method"]), attrs)


def align_analyzers(
    frame: pd.DataFrame,
    gas_columns: list[str],
    settings: CheckSettings | Mapping[str, Any],
    fallback_delay_s: float | None,
) -> tuple[pd.DataFrame, dict[str, Any]]:
    """Estimate the analyzer transport delay and shift the gas channels earlier by it.

    Parameters
    ----------
    frame: ingest output, float64 ``time`` [s] and canonical columns (fuel_mass_flow,
        air_mass_flow [kg/h], gases [mol/mol], ...).
    gas_columns: the analyzer channels to shift (``lambda_sensor`` is fast and never shifted).
    settings: the checks settings (alignment_* thresholds) or the ``[checks]`` table.
    fallback_delay_s: ``[sampling] analyzer_delay_s`` when configured, else None (then
        ``default_analyzer_delay_s`` is the fallback).

    Returns
    -------
    The shifted frame (a copy) and attributes for the ``/alignment`` group:
    ``analyzer_delay_s``, ``method`` ("cross-correlation" | "configured" | "default"),
    ``quality`` (normalised peak height 0..1), ``transients``, ``per_channel_delay_s`` and
    ``per_channel_quality`` (JSON text), ``reference`` and the thresholds used.

    Source: REFERENCES 1.12 (t50, 40 CFR 1065.308: shift each analyzer signal back by its delay).
    """
    s = resolve_settings(settings)
    gas_columns = [c for c in gas_columns if c in frame and c != "lambda_sensor"]
    delays, quality, transients = estimate_delays(frame, gas_columns, s)
    min_q = s["alignment_min_quality"]
    good = {c: d for c, d in delays.items() if np.isfinite(d) and quality[c] >= min_q}
    primary = [c for c in PRIMARY_CHANNELS if c in good] or list(good)
    enough = transients >= s["alignment_min_transients"]
    if enough and primary:
        w = np.array([quality[c] for c in primary])
        delay = float(np.sum(w * np.array([good[c] for c in primary])) / np.sum(w))
        q = float(np.max(w))
        method = "cross-correlation"
        # a channel keeps its own delay only when its own peak is nearly as clear as the
        # common one; weak channels (CO, THC on a lean engine) take the common delay
        own = {c: d for c, d in good.items() if quality[c] >= 0.8 * q}
        per_channel = {c: own.get(c, delay) for c in gas_columns}
    else:
        if fallback_delay_s is not None:
            delay, method = float(fallback_delay_s), "configured"
        else:
            delay, method = float(s["default_analyzer_delay_s"]), "default"
        q = float(max(quality.values(), default=0.0))
        per_channel = {c: delay for c in gas_columns}
    time = frame["time"].to_numpy(dtype=float)
    out = with_columns(
        frame,
        {c: shift_earlier(time, frame[c].to_numpy(dtype=float), per_channel[c])
         for c in gas_columns},
    )
    attrs: dict[str, Any] = {
        "analyzer_delay_s": delay,
        "method": method,
        "quality": q,
        "transients": int(transients),
        "reference": "d/dt(fuel_mass_flow/air_mass_flow), cross-correlation of derivatives",
        "per_channel_delay_s": json.dumps({c: round(v, 3) for c, v in per_channel.items()}),
        "per_channel_estimate_s": json.dumps(
            {c: (round(v, 3) if np.isfinite(v) else None) for c, v in delays.items()}
        ),
        "per_channel_quality": json.dumps({c: round(v, 4) for c, v in quality.items()}),
        "fallback_delay_s": float(fallback_delay_s)
        if fallback_delay_s is not None
        else float(s["default_analyzer_delay_s"]),
    }
    for key in (
        "alignment_max_delay_s",
        "alignment_grid_s",
        "alignment_smooth_s",
        "alignment_min_transients",
        "alignment_transient_fraction",
        "alignment_min_quality",
        "alignment_transient_window_s",
    ):
        attrs[key] = float(s[key])
    return out, attrs
