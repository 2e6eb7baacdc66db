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
