"""Data-quality flags: ``out_of_range`` readings and ``time_irregular`` time columns."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..constants import MAD_TO_SIGMA
from ..quantities import GASES
from ..records import Flag
from .timebase import mask_runs, median_may_reach, median_step, merge_runs, rolling_median_at


def _percent(x: float) -> str:
    return f"{100.0 * x:.3g} %"


def out_of_range_flags(
    frame: pd.DataFrame,
    ranges: dict[str, float],
    settings: dict,
    *,
    judged_gases: np.ndarray | None = None,
) -> list[Flag]:
    """Negative gas concentrations and readings above the configured full-scale range.

    A concentration is negative when it is below -(``out_of_range_negative_fraction`` of its
    range) or, with no range, below -``out_of_range_negative_abs`` (common practice: noise around
    a zero reading is not a fault), and never closer to zero than six times the channel's
    own noise after the rolling median. A reading above ``out_of_range_high_fraction`` of the range
    is out of range (40 CFR 1065.550 range rule, REFERENCES 1.10 [M]). Both tests use a
    centred rolling median over ``out_of_range_smooth_s``. Stretches closer than
    ``out_of_range_merge_gap_s`` are merged; one flag per stretch. Gas readings count only
    where ``judged_gases`` (the analyzers sample exhaust of a running engine): zero gas,
    span gas and ambient air are not exhaust readings.
    """
    time = frame["time"].to_numpy(dtype=float)
    n_smooth = max(1, int(round(settings["out_of_range_smooth_s"] / median_step(time))))
    rows: list[Flag] = []
    for col in frame.columns:
        if col == "time":
            continue
        is_gas = col in GASES
        full = ranges.get(col)
        if not is_gas and full is None:
            continue
        raw = frame[col].to_numpy(dtype=float)
        if is_gas and judged_gases is not None:
            raw = np.where(judged_gases, raw, np.nan)
        # a rolling median, so noise around a zero reading is not taken for a negative reading
        limits: list[tuple[str, float, float]] = []  # (what, median <= low, median >= high)
        if is_gas:
            tol = (
                settings["out_of_range_negative_fraction"] * full
                if full
                else settings["out_of_range_negative_abs"]
            )
            # never tighter than 6 x the noise left after the rolling median (sample noise
            # from successive differences, 1.4826 MAD / sqrt(2); the median of n normal
            # samples scatters by 1.2533 sigma / sqrt(n))
            d = np.diff(raw[np.isfinite(raw)])
            if d.size:
                noise = MAD_TO_SIGMA * float(np.median(np.abs(d - np.median(d)))) / np.sqrt(2.0)
                tol = max(tol, 6.0 * 1.2533 * noise / np.sqrt(n_smooth))
            limits.append(("negative", -tol, np.inf))
        if full:
            limits.append(("above range", -np.inf, settings["out_of_range_high_fraction"] * full))
        # The centred rolling median (min_periods 1) is computed only where it may cross a limit
        # (exact pre-test, see median_may_reach) and over the stretches flagged; the values are
        # those of the median of the whole channel.
        maybe = np.zeros(len(raw), dtype=bool)
        for _, low, high in limits:
            maybe |= median_may_reach(raw, n_smooth, 1, low, high)
        x = rolling_median_at(raw, n_smooth, 1, maybe)
        checks = []
        with np.errstate(invalid="ignore"):
            for what, low, high in limits:
                checks.append((what, x < low if what == "negative" else x > high))
        spans = [
            (what, mask, merge_runs(mask_runs(mask), time, settings["out_of_range_merge_gap_s"]))
            for what, mask in checks
        ]
        flagged = np.zeros(len(raw), dtype=bool)
        for _, _, runs in spans:
            for i0, i1 in runs:
                flagged[i0 : i1 + 1] = True
        if flagged.any():  # the worst value of a stretch is read from the median over it
            x = rolling_median_at(raw, n_smooth, 1, maybe | flagged)
        for what, mask, runs in spans:
            for i0, i1 in runs:
                seg = x[i0 : i1 + 1]
                worst = float(np.nanmin(seg) if what == "negative" else np.nanmax(seg))
                if full:
                    value = 100.0 * worst / full
                    detail = f"{value:+.1f} % of its {full:g} range"
                else:
                    value = worst
                    detail = f"{worst:.3g} mol/mol" if is_gas else f"{worst:.4g}"
                rows.append(
                    Flag(
                        start_s=time[i0],
                        end_s=time[i1],
                        check="out_of_range",
                        suspect=col,
                        severity="warning",
                        value=value,
                        message=f"{col} reads {what} ({detail} at worst, "
                        f"{int(np.sum(mask[i0 : i1 + 1]))} samples).",
                        unit="percent" if full else ("mol/mol" if is_gas else "1"),
                    )
                )
    return rows


def time_irregular_flags(time: np.ndarray, settings: dict) -> list[Flag]:
    """Duplicate time stamps, backward resets and irregular steps of the time column.

    A step is irregular when it exceeds ``time_step_factor`` x the median step but stays below
    ``time_gap_factor`` x (longer steps are data gaps, flagged by the pipeline). Consecutive
    irregular samples within ``time_gap_factor`` median steps are one flag (common practice).
    """
    t = np.asarray(time, dtype=float)
    if t.size < 3:
        return []
    dt = np.diff(t)
    step = median_step(t)
    kinds = {
        "duplicate time stamps": dt == 0,
        "time runs backwards (reset)": dt < 0,
        "irregular sample steps": (dt > settings["time_step_factor"] * step)
        & (dt <= settings["time_gap_factor"] * step),
    }
    rows: list[Flag] = []
    for what, mask in kinds.items():
        runs = mask_runs(mask)
        if not len(runs):
            continue
        # merge in sample-index space: runs closer than time_gap_factor samples
        gaps = runs[1:, 0] - runs[:-1, 1]
        new = np.concatenate(([True], gaps > settings["time_gap_factor"]))
        gid = np.cumsum(new) - 1
        starts = pd.Series(runs[:, 0]).groupby(gid).min().to_numpy()
        ends = pd.Series(runs[:, 1]).groupby(gid).max().to_numpy()
        for i0, i1 in zip(starts, ends, strict=True):
            count = int(np.sum(mask[i0 : i1 + 1]))
            worst = float(
                np.min(dt[i0 : i1 + 1]) if "backwards" in what else np.max(dt[i0 : i1 + 1])
            )
            rows.append(
                Flag(
                    start_s=float(min(t[i0], t[i1 + 1])),
                    end_s=float(max(t[i0], t[i1 + 1])),
                    check="time_irregular",
                    suspect="time",
                    severity="error" if "backwards" in what else "warning",
                    value=worst,
                    message=f"{what}: {count} step(s), worst {worst:+.3g} s "
                    f"(median step {step:.3g} s).",
                )
            )
    return rows
