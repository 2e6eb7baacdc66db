"""Analyzer drift correction from zero and span readings (40 CFR 1065.672) and the drift
validation comparison (40 CFR 1065.550).

The correction formula is REFERENCES 1.10 ([V-ex]: reproduces the CFR example, 435.5 ->
450.2 umol/mol); the +-4 % validation limit of 1065.550 is from memory ([M]).

Zero and span readings come from the config (``[drift_correction.<gas>] pre_zero`` ...) or
from the log itself: windows where ``analyzer_mode`` reports zero gas or span gas. Pre values
are the last window before a sample, post values the first after it (1065.672: they may lie
on either side of other intervals); a missing pre value defaults to the reference value, a
missing post value makes the correction impossible there (NaN, reported).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from ..records import with_columns
from ..spans import runs

if TYPE_CHECKING:
    from ..config import Config

#: 1065.550 drift validation: corrected and uncorrected brake-specific results may differ by
#: at most this fraction of the uncorrected result (REFERENCES 1.10, [M]).
VALIDATION_LIMIT = 0.04


def drift_correct(
    x: ArrayLike,
    ref_zero: ArrayLike,
    ref_span: ArrayLike,
    pre_zero: ArrayLike,
    pre_span: ArrayLike,
    post_zero: ArrayLike,
    post_span: ArrayLike,
) -> NDArray[np.float64]:
    """Drift-corrected concentration, 40 CFR 1065.672 (REFERENCES 1.10)::

        x_cor = x_refzero + (x_refspan - x_refzero) (2 x - (x_prezero + x_postzero))
                / ((x_prespan + x_postspan) - (x_prezero + x_postzero))
    """
    x = np.asarray(x, float)
    zero_sum = np.asarray(pre_zero, float) + np.asarray(post_zero, float)
    span_sum = np.asarray(pre_span, float) + np.asarray(post_span, float)
    rz, rs = np.asarray(ref_zero, float), np.asarray(ref_span, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = rz + (rs - rz) * (2 * x - zero_sum) / (span_sum - zero_sum)
    return np.where(np.isfinite(out), out, np.nan)


@dataclass(frozen=True)
class CalReading:
    """One zero or span reading found in the log: the window and the analyzer's mean."""

    kind: str  # "zero" or "span"
    start_s: float
    end_s: float
    value: float


def readings_from_log(
    time: ArrayLike,
    values: ArrayLike,
    mode: ArrayLike,
    *,
    zero_code: float = 1,
    span_code: float = 2,
    settle_s: float = 60.0,
) -> list[CalReading]:
    """Zero and span readings from the ``analyzer_mode`` windows of the log.

    Each window's reading is the median of the samples more than ``settle_s`` from both ends
    of the window (transport delay and analyzer response; common practice is to read the
    stable part). Windows too short for that are skipped.
    """
    t = np.asarray(time, float)
    v = np.asarray(values, float)
    m = np.asarray(mode, float)
    out: list[CalReading] = []
    for kind, code in (("zero", zero_code), ("span", span_code)):
        starts, ends = runs(m == code)
        for a, b in zip(starts, ends, strict=True):
            inside = (t >= t[a] + settle_s) & (t <= t[b] - settle_s)
            inside[:a] = False
            inside[b + 1 :] = False
            good = inside & np.isfinite(v)
            if good.any():
                out.append(CalReading(kind, float(t[a]), float(t[b]), float(np.median(v[good]))))
    return sorted(out, key=lambda r: r.start_s)


def pre_post(
    time: ArrayLike, readings: list[CalReading], kind: str, default_pre: float
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """For every sample, the last ``kind`` reading ending before it and the first starting
    after it (1065.672); no pre reading -> ``default_pre`` (the reference), no post -> NaN."""
    t = np.asarray(time, float)
    sel = [r for r in readings if r.kind == kind]
    ends = np.array([r.end_s for r in sel])
    starts = np.array([r.start_s for r in sel])
    vals = np.array([r.value for r in sel])
    if not sel:
        return np.full(t.shape, float(default_pre)), np.full(t.shape, np.nan)
    i_pre = np.searchsorted(ends, t, side="right") - 1
    pre = np.where(i_pre >= 0, vals[np.clip(i_pre, 0, None)], default_pre)
    i_post = np.searchsorted(starts, t, side="left")
    post = np.where(i_post < len(sel), vals[np.clip(i_post, None, len(sel) - 1)], np.nan)
    return pre, post


def validation(uncorrected: float, corrected: float) -> tuple[float, bool]:
    """1065.550 drift validation of one brake-specific (or mass) result: the relative
    difference and whether it is within +-4 % of the uncorrected value ([M])."""
    if not np.isfinite(uncorrected) or not np.isfinite(corrected) or uncorrected == 0:
        return float("nan"), False
    diff = (corrected - uncorrected) / abs(uncorrected)
    return float(diff), bool(abs(diff) <= VALIDATION_LIMIT)


def apply_drift_correction(
    frame: pd.DataFrame, config: Config
) -> tuple[pd.DataFrame | None, pd.DataFrame | None, list[str]]:
    """Drift-correct the configured analyzer channels of ``frame`` (40 CFR 1065.672).

    Returns ``(corrected_frame, readings_table, notes)``; ``corrected_frame`` is None when no
    analyzer has a ``[drift_correction.<gas>]`` table. References and configured readings are
    in the channel's unit and converted like the data (THC also by its carbon number).
    Readings not given in the config are taken from the log's zero/span windows. Samples
    without a post zero and post span reading after them cannot be corrected and are NaN.
    """
    from ..units import converter

    dc = config.drift_correction
    if not dc.gases:
        return None, None, []
    t = frame["time"].to_numpy(float)
    mode = frame["analyzer_mode"].to_numpy(float) if "analyzer_mode" in frame else None
    corrected: dict[str, np.ndarray] = {}
    rows = []
    notes: list[str] = []
    for gas, ref in dc.gases.items():
        ch = config.channels[gas]
        conv = converter(ch.unit, gas, f"[drift_correction.{gas}]")
        scale = ch.carbon_number if gas == "thc" else 1.0

        def canon(v: float | None, conv=conv, scale=scale) -> float | None:
            return None if v is None else float(conv(np.array([v]))[0]) * scale

        ref_zero, ref_span = canon(ref.zero_gas), canon(ref.span_gas)
        found = (
            readings_from_log(t, frame[gas].to_numpy(float), mode, zero_code=dc.zero_mode,
                              span_code=dc.span_mode, settle_s=dc.settle_s)
            if mode is not None else []
        )
        given = {
            "pre_zero": canon(ref.pre_zero), "pre_span": canon(ref.pre_span),
            "post_zero": canon(ref.post_zero), "post_span": canon(ref.post_span),
        }
        # Configured readings stand before the first / after the last sample.
        for key, value in given.items():
            if value is not None:
                when = t[0] - 1.0 if key.startswith("pre") else t[-1] + 1.0
                found.append(CalReading(key.split("_")[1], when, when, value))
                rows.append((gas, key.split("_")[1], "config", np.nan, np.nan, value))
        found.sort(key=lambda r: r.start_s)
        for r in found:
            if not np.isnan(r.start_s) and t[0] <= r.start_s <= t[-1]:
                rows.append((gas, r.kind, "log", r.start_s, r.end_s, r.value))
        pre_z, post_z = pre_post(t, found, "zero", ref_zero)
        pre_s, post_s = pre_post(t, found, "span", ref_span)
        corrected[gas] = drift_correct(frame[gas].to_numpy(float), ref_zero, ref_span,
                                 pre_z, pre_s, post_z, post_s)
        uncovered = ~np.isfinite(post_z + post_s)
        if mode is not None:  # zero/span/purge samples themselves need no correction
            uncovered &= np.nan_to_num(mode) == 0
        if uncovered.any():
            notes.append(
                f"Drift correction of {gas}: no zero/span reading after "
                f"{int(uncovered.sum())} samples; those are not corrected (NaN) and the "
                "1065.550 comparison covers the rest."
            )
    readings = pd.DataFrame(
        rows, columns=["gas", "kind", "source", "start_s", "end_s", "value"]
    )
    for gas, ref in dc.gases.items():
        span = readings["gas"] == gas
        ch = config.channels[gas]
        conv = converter(ch.unit, gas, f"[drift_correction.{gas}]")
        scale = ch.carbon_number if gas == "thc" else 1.0
        ref_span = float(conv(np.array([ref.span_gas]))[0]) * scale
        ref_zero = float(conv(np.array([ref.zero_gas]))[0]) * scale
        reference = np.where(readings.loc[span, "kind"] == "zero", ref_zero, ref_span)
        readings.loc[span, "reference"] = reference
        readings.loc[span, "error_pct_of_span"] = (
            (readings.loc[span, "value"] - reference) / ref_span * 100.0
        )
    readings.attrs["units"] = {
        "start_s": "s", "end_s": "s", "value": "mol/mol", "reference": "mol/mol",
        "error_pct_of_span": "percent",
    }
    readings.attrs["long_names"] = {
        "value": "zero or span reading of the analyzer (canonical units)",
        "reference": "zero or span gas value (the bottle)",
    }
    return with_columns(frame, corrected), readings, notes
