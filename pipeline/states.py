"""Operating state of the engine per sample: off, starting, idle, running.

Runs on the ingest frame, before the balance: where the engine is off or still starting,
lambdas and exhaust-based results mean nothing and are not computed (NaN), and the checks
judge no instrument there. From speed and fuel flow (and torque for idle), all thresholds
named in :mod:`pipeline.checks.settings` (``engine_*``), common practice:

- ``off``: speed below ``engine_off_speed_rpm`` or fuel flow at or below
  ``engine_off_fuel_fraction`` of the night's 99th percentile (stopped, cranking, fuel cut),
  for at least ``engine_min_stop_s``;
- ``starting``: the first ``engine_start_settle_s`` after an off stretch;
- ``idle``: running below ``engine_idle_torque_fraction`` of the 99th-percentile torque;
- ``running``: everything else (steady or transient; the steady mask says which).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from .quantities import DERIVED
from .spans import runs

ENGINE_OFF, ENGINE_STARTING, ENGINE_IDLE, ENGINE_RUNNING = 0, 1, 2, 3

#: CF ``flag_values`` / ``flag_meanings`` of the ``engine_state`` series.
ENGINE_STATE_ATTRS: dict[str, Any] = {
    "units": DERIVED["engine_state"].unit,
    "long_name": DERIVED["engine_state"].long_name,
    "flag_values": np.array([0, 1, 2, 3], dtype=np.int8),
    "flag_meanings": "off starting idle running",
}


def _column(frame: pd.DataFrame, name: str) -> np.ndarray | None:
    return frame[name].to_numpy(dtype=float) if name in frame else None


def _p99(x: np.ndarray) -> float:
    good = x[np.isfinite(x)]
    return float(np.percentile(np.abs(good), 99)) if good.size else float("nan")


def engine_state(frame: pd.DataFrame, settings: Mapping[str, Any]) -> np.ndarray:
    """``ENGINE_*`` code per sample of ``frame`` (see the module docstring)."""
    t = frame["time"].to_numpy(dtype=float)
    n = t.size
    speed = _column(frame, "speed")
    fuel = _column(frame, "fuel_mass_flow")
    torque = _column(frame, "torque")
    off = np.zeros(n, dtype=bool)
    with np.errstate(invalid="ignore"):
        if speed is not None:
            off |= speed < settings["engine_off_speed_rpm"]
        if fuel is not None:
            full = _p99(fuel)
            if np.isfinite(full) and full > 0:
                off |= fuel <= settings["engine_off_fuel_fraction"] * full
    # off stretches too short to be a stop are running; the rest widened to whole samples
    starts, ends = runs(off)
    keep = (t[ends] - t[starts]) >= settings["engine_min_stop_s"] if starts.size else starts
    state = np.full(n, ENGINE_RUNNING, dtype=np.int8)
    if torque is not None:
        full_t = _p99(torque)
        if np.isfinite(full_t) and full_t > 0:
            with np.errstate(invalid="ignore"):
                state[torque < settings["engine_idle_torque_fraction"] * full_t] = ENGINE_IDLE
    settle = settings["engine_start_settle_s"]
    edges = np.zeros(n + 1, dtype=np.int64)
    for a, b in zip(starts[keep], ends[keep], strict=True):  # one per stop (a few a night)
        edges[a] += 1
        edges[b + 1] -= 1
        if b + 1 < n:
            hi = int(np.searchsorted(t, t[b] + settle, side="right"))
            state[b + 1 : hi] = ENGINE_STARTING
    state[np.cumsum(edges[:-1]) > 0] = ENGINE_OFF
    return state


def running(state: np.ndarray) -> np.ndarray:
    """Samples where the engine fires and has settled (idle or running)."""
    return np.asarray(state) >= ENGINE_IDLE


BENCH_SAMPLE, BENCH_ZERO, BENCH_SPAN, BENCH_PURGE, BENCH_LEAK, BENCH_OTHER, BENCH_RESPONSE = (
    0, 1, 2, 3, 4, 5, 6
)

#: CF ``flag_values`` / ``flag_meanings`` of the ``bench_state`` series.
BENCH_STATE_ATTRS: dict[str, Any] = {
    "units": DERIVED["bench_state"].unit,
    "long_name": DERIVED["bench_state"].long_name,
    "flag_values": np.arange(7, dtype=np.int8),
    "flag_meanings": "sample zero span purge leak_check not_exhaust response",
}

#: Above this O2 (mol/mol) gas without exhaust carbon is air (a purge), below it zero gas
#: (common practice: zero gas is N2 or synthetic air; we call synthetic air a purge too).
PURGE_MIN_O2 = 0.15


def bench_state(
    frame: pd.DataFrame,
    sampling_state: np.ndarray,
    zero_mode: float,
    span_mode: float,
    impossible_o2_plus_co2: float,
) -> np.ndarray:
    """``BENCH_*`` code per sample: what the analyzers see. From the logged ``analyzer_mode``
    where it says the bench is not sampling (its zero and span codes, 3 purge, 4 leak check),
    else from the gases the balance found not to be exhaust: no carbon with air's O2 is a
    purge, no carbon without O2 a zero gas, CO2 + O2 above air's a span gas; the response
    guard around a switch is ``response``."""
    from .balance import STATE_ANALYZER_MODE, STATE_LOW_CARBON, STATE_SAMPLING

    state = np.asarray(sampling_state)
    n = state.size
    out = np.full(n, BENCH_OTHER, dtype=np.int8)
    out[state == STATE_SAMPLING] = BENCH_SAMPLE
    o2 = _column(frame, "o2")
    co2 = _column(frame, "co2")
    low = state == STATE_LOW_CARBON
    if o2 is not None:
        with np.errstate(invalid="ignore"):
            out[low & (o2 >= PURGE_MIN_O2)] = BENCH_PURGE
            out[low & ~(o2 >= PURGE_MIN_O2)] = BENCH_ZERO
    else:
        out[low] = BENCH_ZERO
    rest = (state != STATE_SAMPLING) & ~low & (state != STATE_ANALYZER_MODE)
    if o2 is not None and co2 is not None:
        with np.errstate(invalid="ignore"):
            span = rest & (o2 + co2 > impossible_o2_plus_co2)
        out[span] = BENCH_SPAN
        out[rest & ~span] = BENCH_RESPONSE
    mode = _column(frame, "analyzer_mode")
    if mode is not None:
        logged = (state == STATE_ANALYZER_MODE) | ((state != STATE_SAMPLING) &
                                                   np.isfinite(mode) & (mode != 0))
        for code, value in ((BENCH_ZERO, zero_mode), (BENCH_SPAN, span_mode),
                            (BENCH_PURGE, 3.0), (BENCH_LEAK, 4.0)):
            out[logged & (mode == value)] = code
        out[(state == STATE_ANALYZER_MODE) & ~np.isin(mode, [zero_mode, span_mode, 3.0, 4.0])
            ] = BENCH_OTHER
    return out
