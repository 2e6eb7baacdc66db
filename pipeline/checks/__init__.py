"""The checks stage: steady points, residuals, disagreement, drift, attribution, flags,
verdicts.

Between balance and report. Pure functions over arrays; every threshold is a named default in
:mod:`pipeline.checks.settings` that the ``[checks]`` config table can override, and the full
set used is returned in :attr:`ChecksResult.attrs` for the result file.

- :func:`run_checks`: everything else, on the aligned frame and the balance output, ending
  with the one verdict computation (:mod:`.verdicts`).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import numpy as np
import pandas as pd

from ..instruments import CORE_INSTRUMENTS
from ..quantities import DERIVED, GASES
from ..records import Flag, make_flags
from ..spans import sample_seconds
from ..states import running
from . import attribution as attr_mod
from .availability import (
    condensation_flags,
    engine_off_flags,
    gap_flags,
    method_invalid_flags,
    not_sampling_flags,
)
from .disagreement import disagreement_intervals, merge_events
from .drift import DriftResult, block_samples, detect_drift, drift_table, refine_step_onset
from .quality import out_of_range_flags, time_irregular_flags
from .residuals import ESTIMATE_COLUMNS, carbon_fuel_flow, compute_residuals, relative_residual
from .settings import CheckSettings, resolve_settings, thresholds_used
from .steady import steady_mask, steady_points_table
from .timebase import format_elapsed, make_clock
from .verdicts import Verdict, judge, verdicts_table

__all__ = ["CheckSettings", "ChecksResult", "run_checks"]


@dataclass
class ChecksResult:
    """Output of :func:`run_checks` (see the module docstring of each part).

    series: per-row arrays for ``/timeseries/`` (``steady``, ``residual_*``,
    ``fuel_mass_flow_carbon``, ``residual_fuel_flow``); series_attrs: ``units`` and
    ``long_name`` per series; flags: FLAG_COLUMNS table; tables: ``steady_points`` and
    ``drift`` and ``verdicts``; attrs: every threshold used plus method notes; verdicts: one
    :class:`~pipeline.checks.verdicts.Verdict` per instrument (also as the ``verdicts``
    table).
    """

    series: dict[str, np.ndarray]
    series_attrs: dict[str, dict[str, Any]]
    flags: pd.DataFrame
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    attrs: dict[str, Any] = field(default_factory=dict)
    verdicts: list[Verdict] = field(default_factory=list)


def _column(df: pd.DataFrame, name: str, n: int, default: float = np.nan) -> np.ndarray:
    return df[name].to_numpy(dtype=float) if name in df else np.full(n, default)


def _series_attrs(residual_names: list[str]) -> dict[str, dict[str, Any]]:
    """``units`` and ``long_name`` of the checks' series, from the glossary."""
    names = ["steady", "fuel_mass_flow_carbon", "residual_fuel_flow", *residual_names]
    return {n: {"units": DERIVED[n].unit, "long_name": DERIVED[n].long_name} for n in names}


def _judged_mask(derived: pd.DataFrame, n: int) -> np.ndarray:
    valid = _column(derived, "valid", n, 1.0)
    sampling = _column(derived, "sampling", n, 1.0)
    return (valid > 0.5) & (sampling > 0.5)


def _typical_lambda(lam: np.ndarray, mask: np.ndarray) -> float:
    x = lam[mask & np.isfinite(lam)]
    return float(np.median(x)) if x.size else float("nan")


def _disagreement_flags(
    time: np.ndarray,
    residuals: dict[str, np.ndarray],
    judged: np.ndarray,
    noise: dict[str, float],
    lam: float,
    s: dict[str, Any],
    clock: Callable[[float], str] = format_elapsed,
) -> list[Flag]:
    spans: list[tuple[float, float]] = []
    for name, r in residuals.items():
        tol = (
            s["disagreement_tolerance_sensor"] if "sensor" in name else s["disagreement_tolerance"]
        )
        for i0, i1 in disagreement_intervals(time, r, judged, tol, s):
            spans.append((float(time[i0]), float(time[i1])))
    rows = []
    for a, b in merge_events(spans):
        inside = judged & (time >= a) & (time <= b)
        shifts = {
            n: float(np.nanmedian(r[inside])) if inside.any() else np.nan
            for n, r in residuals.items()
        }
        att = attr_mod.attribute(shifts, noise, lam, s["attribution_min_explained"])
        worst = max((abs(v) for v in shifts.values() if np.isfinite(v)), default=0.0)
        rows.append(
            Flag(
                start_s=a,
                end_s=b,
                check="lambda_disagreement",
                suspect=att.suspect,
                severity="error" if worst > 2.0 * s["disagreement_tolerance"] else "warning",
                value=100.0 * att.amount,
                message=f"Lambda estimates disagree from {clock(a)} to "
                f"{clock(b)} (worst median residual {100 * worst:.1f} %): "
                + attr_mod.describe(att),
            )
        )
    return rows


def _drift_flags(
    blocks: pd.DataFrame,
    results: list[DriftResult],
    noise: dict[str, float],
    lam: float,
    s: dict[str, Any],
    clock: Callable[[float], str] = format_elapsed,
) -> list[Flag]:
    detected = [r for r in results if r.detected]
    events = merge_events([(r.onset_s, r.end_s) for r in detected])
    rows = []
    for a, b in events:
        members = [r for r in detected if a <= r.onset_s <= b]
        lead = max(members, key=lambda r: r.significance)
        t = blocks["t_mid"].to_numpy()
        inside = (t >= lead.onset_s) & (t <= b)
        shifts = {}
        for r in results:
            if np.isfinite(r.baseline) and inside.any():
                shifts[r.residual] = float(
                    np.nanmedian(blocks[r.residual].to_numpy()[inside]) - r.baseline
                )
        att = attr_mod.attribute(shifts, noise, lam, s["attribution_min_explained"])
        hours = (b - lead.onset_s) / 3600.0
        rows.append(
            Flag(
                start_s=lead.onset_s,
                end_s=b,
                check="drift",
                suspect=att.suspect,
                severity="warning",
                value=100.0 * att.amount,
                message=f"{lead.kind.capitalize()} drift from {clock(lead.onset_s)} "
                f"for {hours:.1f} h (rate {100 * lead.rate_per_h:+.2f} %/h on "
                f"{lead.residual}): " + attr_mod.describe(att),
            )
        )
    return rows


def run_checks(
    frame: pd.DataFrame,
    derived: pd.DataFrame,
    settings: CheckSettings | Mapping[str, Any],
    *,
    has_sensor: bool,
    start_time: datetime | None = None,
    logged: pd.DataFrame | None = None,
    sampling_state: np.ndarray | None = None,
    engine_state: np.ndarray | None = None,
    update_rows: Mapping[str, int] | None = None,
    sensitivity: Mapping[str, float] | None = None,
) -> ChecksResult:
    """Steady points, residuals, disagreement, drift, attribution, every flag of the night
    and the verdict per instrument.

    Parameters
    ----------
    frame: the aligned ingest frame (``time`` [s] and canonical channels).
    derived: balance output on the same rows: ``lambda_flow``, ``lambda_carbon``,
        ``lambda_oxygen``, ``valid`` and ``sampling`` (1/0), ``exhaust_dewpoint``.
    settings: a :class:`CheckSettings`, or the ``[checks]`` table (unknown keys raise
        ConfigError), optionally with ``ranges`` = {quantity: full scale, canonical units}.
    has_sensor: whether ``frame`` holds a logged ``lambda_sensor``.
    start_time: absolute start of the run (UTC); messages then give clock times.
    logged: the frame as logged (before the analyzer shift), for ``data_gap`` flags: gaps are
        found in the data as logged, so a dropout of the whole logger is one flag and the
        shifted tail is not mistaken for one.
    sampling_state: the balance's per-sample sampling state, for ``analyzer_not_sampling``.
    engine_state: :func:`pipeline.states.engine_state` per sample: steady points, residual
        checks and range checks use running samples only; each stop is an ``engine_off``
        interval.
    update_rows: rows between the updates of channels logged at a lower rate than the file
        (``RunMeta.update_rows``), for ``data_gap``.
    sensitivity: d ln(lambda) / d(reading) per instrument (``o2``), so a verdict states the
        fault in the instrument's own unit.
    """
    s = resolve_settings(settings)
    typed = settings if isinstance(settings, CheckSettings) else None
    time = frame["time"].to_numpy(dtype=float)
    n = len(time)
    estimates = {k: _column(derived, ESTIMATE_COLUMNS[k], n) for k in ("flow", "carbon", "oxygen")}
    if has_sensor and "lambda_sensor" in frame:
        estimates["sensor"] = frame["lambda_sensor"].to_numpy(dtype=float)
    residuals = compute_residuals(estimates)
    fuel = _column(frame, "fuel_mass_flow", n)
    fuel_c = carbon_fuel_flow(fuel, estimates["flow"], estimates["carbon"])
    on = running(engine_state) if engine_state is not None else np.ones(n, dtype=bool)
    judged = _judged_mask(derived, n) & on
    steady, runs = steady_mask(frame, s, on)
    judged_steady = steady & judged

    series: dict[str, np.ndarray] = {"steady": steady.astype(np.int8)}
    series.update(residuals)
    series["fuel_mass_flow_carbon"] = fuel_c
    series["residual_fuel_flow"] = relative_residual(fuel_c, fuel)

    table_cols = {
        q: _column(frame, q, n)
        for q in ("speed", "torque", "fuel_mass_flow", "air_mass_flow")
        if q in frame
    }
    table_cols.update({ESTIMATE_COLUMNS[k]: v for k, v in estimates.items()})
    table_cols.update(residuals)
    steady_points = steady_points_table(time, runs, table_cols, judged)

    lam = _typical_lambda(estimates["flow"], judged_steady)
    blocks = block_samples(time, runs, judged, residuals, s)
    results = [detect_drift(blocks, name, s) for name in residuals]
    for res in results:
        if res.detected and res.kind == "step":
            res.onset_s = refine_step_onset(time, residuals[res.residual], judged_steady, res)
    noise = {r.residual: (r.noise if np.isfinite(r.noise) else 0.01) for r in results}

    rows: list[Flag] = []
    clock = make_clock(start_time)
    rows += _disagreement_flags(time, residuals, judged_steady, noise, lam, s, clock)
    rows += _drift_flags(blocks, results, noise, lam, s, clock)
    rows += out_of_range_flags(frame, s["ranges"], s, judged_gases=on & _sampling(derived, n))
    rows += time_irregular_flags(time, s)
    rows += _availability_flags(frame, derived, logged, sampling_state, engine_state, s, typed,
                                update_rows)
    flags = make_flags(rows)
    if len(flags):
        flags = flags.sort_values(["start_s", "check"], kind="stable").reset_index(drop=True)

    attrs: dict[str, Any] = thresholds_used(s)
    attrs["drift_statistic"] = "two-sided CUSUM on steady-block medians, MAD noise scale"
    attrs["attribution_lambda_typical"] = lam
    attrs["steady_points"] = int(len(runs))
    attrs["drift_blocks"] = int(len(blocks))
    instruments = list(CORE_INSTRUMENTS)
    if "sensor" in estimates:
        instruments.append("lambda_sensor")
    instruments += [g for g in GASES if g in frame and g not in instruments]
    drift = drift_table(results)
    verdicts = judge(
        flags, instruments, drift=drift, start_time=start_time,
        end_s=float(time[-1]) if n else float("nan"), sensitivity=sensitivity,
        judged_s=float(np.sum(sample_seconds(time)[judged_steady])),
        min_judged_s=s["verdict_min_judged_s"],
    )
    return ChecksResult(
        series=series,
        series_attrs=_series_attrs(list(residuals)),
        flags=flags,
        tables={"steady_points": steady_points, "drift": drift,
                "verdicts": verdicts_table(verdicts)},
        attrs=attrs,
        verdicts=verdicts,
    )


def _sampling(derived: pd.DataFrame, n: int) -> np.ndarray:
    return _column(derived, "sampling", n, 1.0) > 0.5


def _availability_flags(
    frame: pd.DataFrame,
    derived: pd.DataFrame,
    logged: pd.DataFrame | None,
    sampling_state: np.ndarray | None,
    engine_state: np.ndarray | None,
    s: Mapping[str, Any],
    settings: CheckSettings | None,
    update_rows: Mapping[str, int] | None = None,
) -> list[Flag]:
    """Gaps (in the data as logged), analyzers not sampling, condensation risk, invalid
    alternative lambda methods (:mod:`.availability`)."""
    time = frame["time"].to_numpy(dtype=float)
    n = len(time)
    out: list[Flag] = []
    if logged is not None:
        essential = [c for c in ("fuel_mass_flow", "air_mass_flow", *GASES) if c in logged]
        out += gap_flags(
            logged["time"].to_numpy(dtype=float), {c: logged[c].to_numpy() for c in essential},
            update_rows=update_rows,
        )
    fuel_on = np.nan_to_num(_column(frame, "fuel_mass_flow", n), nan=0.0) > 0
    on = running(engine_state) & fuel_on if engine_state is not None else fuel_on
    if sampling_state is not None:
        out += not_sampling_flags(time, sampling_state, on,
                                  merge_gap_s=s["availability_merge_gap_s"],
                                  min_duration_s=s["availability_min_duration_s"])
    if engine_state is not None:
        out += engine_off_flags(time, engine_state, merge_gap_s=s["availability_merge_gap_s"])
    margin = settings.condensation_margin_K if settings is not None else 5.0
    if "exhaust_dewpoint" in derived:
        line = _column(frame, "sample_line_temperature", n) if "sample_line_temperature" in frame \
            else None
        out += condensation_flags(time, line, _column(derived, "exhaust_dewpoint", n), margin)
    if settings is not None and settings.extra_lambda:
        out += method_invalid_flags(time, derived, settings.extra_lambda, settings.fuel_name,
                                    settings.fuel_o_c)
    return out
