"""Flags on what the data can say: gaps, analyzers not sampling, sample-line condensation,
alternative lambda methods not valid for the fuel.

The balance stage computes the quantities and masks behind these (``sampling_state``,
``exhaust_dewpoint``, the alternative lambdas); this module raises the flags, so every flag
of a night is raised by the checks stage.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from ..balance import STATE_ANALYZER_MODE, STATE_LOW_CARBON, STATE_SAMPLING
from ..records import Flag
from ..spans import mask_to_intervals, runs
from ..states import ENGINE_OFF

#: Why analyzers do not see exhaust, by the strongest ``sampling_state`` code in a stretch.
_NOT_SAMPLING_WHY = {
    STATE_ANALYZER_MODE: "analyzer_mode reports zero/span/purge",
    STATE_LOW_CARBON: "exhaust carbon reads near zero while fuel flows",
}
_NOT_EXHAUST_WHY = "CO2 + O2 read above air's O2, as with span gas"


def not_sampling_flags(
    time: np.ndarray,
    sampling_state: np.ndarray,
    engine_on: np.ndarray,
    *,
    merge_gap_s: float = 0.0,
    min_duration_s: float = 0.0,
) -> list[Flag]:
    """``analyzer_not_sampling`` (info) for each stretch where the analyzers do not see
    exhaust while the engine runs (stretches closer than ``merge_gap_s`` are one, shorter
    than ``min_duration_s`` not listed); value: samples not sampling in the stretch."""
    state = np.asarray(sampling_state)
    out = []
    mask = (state != STATE_SAMPLING) & engine_on
    for start, end, i0, i1 in mask_to_intervals(time, mask, min_duration_s=min_duration_s,
                                                merge_gap_s=merge_gap_s):
        why = _NOT_SAMPLING_WHY.get(int(state[i0 : i1 + 1].max()), _NOT_EXHAUST_WHY)
        count = int(mask[i0 : i1 + 1].sum())
        out.append(Flag(
            start, end, "analyzer_not_sampling", "", "info", float(count),
            f"Analyzers not sampling exhaust ({why}); exhaust-based values are NaN for these "
            f"{count} samples.",
        ))
    return out


def engine_off_flags(
    time: np.ndarray, engine_state: np.ndarray, *, merge_gap_s: float = 0.0
) -> list[Flag]:
    """``engine_off`` (info) for each stop of the engine: no instrument is judged there.
    value: the stop's length [s]."""
    out = []
    off = np.asarray(engine_state) == ENGINE_OFF
    for start, end, _, _ in mask_to_intervals(time, off, merge_gap_s=merge_gap_s):
        out.append(Flag(
            start, end, "engine_off", "", "info", float(end - start),
            f"Engine off for {end - start:.0f} s (speed or fuel flow at zero); no lambda and "
            "no instrument check there, and the first minutes after the start are left out.",
        ))
    return out


def condensation_flags(
    time: np.ndarray, line_degC: np.ndarray | None, dewpoint_degC: np.ndarray, margin_k: float
) -> list[Flag]:
    """``condensation_risk`` where the logged sample-line temperature is below the exhaust
    dew point plus ``margin_k`` (stretches closer than 60 s merged, shorter than 10 s
    ignored; common practice). value: the smallest line - dew point [K] in the stretch."""
    if line_degC is None:
        return []
    line = np.asarray(line_degC, dtype=float)
    dew = np.asarray(dewpoint_degC, dtype=float)
    with np.errstate(invalid="ignore"):
        short = line - (dew + margin_k)
        risk = np.isfinite(short) & (short < 0)
    out = []
    for start, end, i0, i1 in mask_to_intervals(time, risk, min_duration_s=10.0,
                                                merge_gap_s=60.0):
        worst = float(np.nanmin((line - dew)[i0 : i1 + 1]))
        where = f"{-worst:.1f} K below" if worst < 0 else f"only {worst:.1f} K above"
        out.append(Flag(
            start, end, "condensation_risk", "sample_line_temperature", "warning", worst,
            f"Sample line {where} the exhaust dew point at worst (margin {margin_k:g} K): "
            "water may condense and wash out NO2 and HC.",
        ))
    return out


def method_invalid_flags(
    time: np.ndarray, derived: pd.DataFrame, methods: Sequence[str], fuel_name: str,
    fuel_o_c: float,
) -> list[Flag]:
    """``method_invalid`` (info) for each alternative lambda method that is NaN throughout
    (e.g. Spindt for an oxygenated fuel)."""
    if not len(time):
        return []
    out = []
    for name in methods:
        col = f"lambda_{name}"
        if col in derived and not np.isfinite(derived[col].to_numpy(dtype=float)).any():
            out.append(Flag(
                float(time[0]), float(time[-1]), "method_invalid", "", "info", float("nan"),
                f"{col} is not valid for fuel '{fuel_name}' (O/C {fuel_o_c:g}); the series "
                "is NaN.",
            ))
    return out


def gap_flags(
    time: np.ndarray,
    columns: Mapping[str, np.ndarray],
    *,
    gap_factor: float = 3.0,
    min_samples: int = 3,
    update_rows: Mapping[str, int] | None = None,
) -> list[Flag]:
    """``data_gap`` flags for runs of missing values and for holes in the time base.

    A run of NaN in a channel is flagged from the last good sample before it to the first good
    one after it (the span with no data); runs that hit several channels over the same span
    become one flag whose ``suspect`` lists them, ``|``-separated. A step in time larger than
    ``gap_factor`` times the median step is a gap of the logger itself (suspect ``time``).
    Runs shorter than ``min_samples`` are not flagged here (single bad cells are counted and
    reported by ingest); for a channel logged at a lower rate (``update_rows``: rows between
    its updates) a gap must last three of its own intervals. value: the gap's length [s].
    """
    t = np.asarray(time, dtype=float)
    n = t.size
    spans: dict[tuple[int, int], list[str]] = {}
    for name, values in columns.items():
        s, e = runs(~np.isfinite(np.asarray(values, dtype=float)))
        if s.size == n and n:  # channel entirely empty: reported by ingest, not as a gap
            continue
        need = max(min_samples, 3 * int((update_rows or {}).get(name, 1)))
        long_enough = (e - s + 1) >= need
        for a, b in zip(s[long_enough], e[long_enough], strict=True):
            if a == 0 and b == n - 1:
                continue
            spans.setdefault((int(a), int(b)), []).append(name)
    out: list[Flag] = []
    for (a, b), names in sorted(spans.items()):
        t0 = t[a - 1] if a > 0 else t[a]
        t1 = t[b + 1] if b + 1 < n else t[b]
        out.append(Flag(
            float(t0), float(t1), "data_gap", "|".join(names), "warning", float(t1 - t0),
            f"No data from {', '.join(names)} for {b - a + 1} samples ({t1 - t0:.1f} s).",
        ))
    if n > 2:
        dt = np.diff(t)
        step = float(np.median(dt))
        for i in np.flatnonzero(dt > gap_factor * step):
            out.append(Flag(
                float(t[i]), float(t[i + 1]), "data_gap", "time", "warning", float(dt[i]),
                f"The log has no rows for {dt[i]:.1f} s (usual step {step:g} s).",
            ))
    return out
