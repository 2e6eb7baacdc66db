"""The numbers behind the report figures and the summary, computed from a result file alone.

Everything here is a pure function of a :class:`pipeline.result.ResultFile` (no plotting, no
file writing), so the data behind each figure is tested numerically on arrays.

Steady-point statistics are recomputed from ``/timeseries/`` over the windows of the
``/steady_points/`` table (or of the ``steady`` mask when the table is absent), using only the
samples that are steady, valid and taken while the analyzers sample exhaust. That keeps a
zero/span window or a logger dropout inside a steady window out of the means.

The per-sample point index and the steady-point and block statistics are computed once per
result object (several figures and the summary use them; see :func:`_memo`); callers get
copies.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from ..balance.emissions import carbon_balance_error_rate
from ..checks.settings import DEFAULTS
from ..checks.timebase import describe_time
from ..checks.verdicts import Verdict, judge, verdicts_from_table
from ..constants import X_CO2_AIR_DRY
from ..instruments import AVAILABILITY_CHECKS, CORE_INSTRUMENTS, FAULT_CHECKS, RESIDUAL_SERIES
from ..result import ResultFile
from ..spans import group_mean_std
from ..states import running

#: Length of the blocks [s] used to show the spread inside steady points in scatter plots.
BLOCK_S = 300.0

#: The residual series of the checks stage and the estimates they compare.
RESIDUALS = RESIDUAL_SERIES

#: Emission-rate series shown per steady point, with plain labels.
EMISSIONS: dict[str, str] = {
    "co2_mass_flow": "CO2",
    "co_mass_flow": "CO",
    "nox_mass_flow": "NOx (as NO2)",
    "thc_mass_flow": "THC (C1)",
}

#: Fraction of a steady point a fault flag must cover to be named in the point's verdict.
MIN_OVERLAP = 0.2

#: Attribute of a ResultFile holding the memo of :func:`_memo`.
_MEMO_ATTR = "_reportdata_memo"


def _memo(res: ResultFile, key: tuple[Any, ...], compute: Any) -> Any:
    """``compute()`` once per result file and ``key``: several figures and the summary need
    the same per-sample index and steady-point means of a 400 000-row night.

    The memo lives on ``res`` and is dropped when ``res.timeseries``, ``res.flags``,
    ``res.tables`` or ``res.attrs`` is replaced or a column is added or removed (the report
    treats a read result as read-only; in-place edits of values are not detected).
    """
    ts = res.timeseries
    state = (ts, res.flags, res.tables, res.attrs, ts.shape, tuple(ts.columns))
    memo = res.__dict__.get(_MEMO_ATTR)
    if memo is None or not _same_state(memo["state"], state):
        memo = {"state": state, "values": {}}
        res.__dict__[_MEMO_ATTR] = memo
    values = memo["values"]
    if key not in values:
        values[key] = compute()
    return values[key]


def _same_state(a: tuple[Any, ...], b: tuple[Any, ...]) -> bool:
    """The first four entries are objects (compared by identity), the rest values."""
    return all(x is y for x, y in zip(a[:4], b[:4], strict=True)) and a[4:] == b[4:]


# ------------------------------------------------------------------------------------------
# time
# ------------------------------------------------------------------------------------------
def clock(res: ResultFile, seconds: float, *, with_elapsed: bool = False) -> str:
    """A time of the night as text: ``HH:MM UTC`` when the start is known, else ``6.2 h``.

    ``with_elapsed`` adds the hours since the start in brackets to a clock time.
    """
    return describe_time(res.start_time, seconds, with_elapsed=with_elapsed)


def duration_text(seconds: float) -> str:
    """A duration as ``63 s``, ``15 min`` or ``3.8 h``."""
    if not np.isfinite(seconds):
        return "unknown duration"
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 2 * 3600:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


# ------------------------------------------------------------------------------------------
# settings
# ------------------------------------------------------------------------------------------
def tolerance(res: ResultFile) -> tuple[float, float, str]:
    """(tolerance, sensor tolerance, source) for the consistency band, as fractions.

    From ``attrs["checks_settings"]`` (``disagreement_tolerance``,
    ``disagreement_tolerance_sensor``) when present, else the checks stage's defaults
    (:mod:`pipeline.checks.settings`), the values such a result was judged with.
    """
    s = res.attrs.get("checks_settings")
    if isinstance(s, dict) and np.isfinite(float(s.get("disagreement_tolerance", np.nan))):
        tol = float(s["disagreement_tolerance"])
        tol_s = float(s.get("disagreement_tolerance_sensor", tol))
        return tol, tol_s, "checks settings of this result"
    return (
        DEFAULTS["disagreement_tolerance"],
        DEFAULTS["disagreement_tolerance_sensor"],
        "checks defaults (no checks settings in result)",
    )


def series(res: ResultFile, name: str) -> np.ndarray | None:
    """A time series as float64, or None when absent or never finite."""
    if name not in res.timeseries.columns:
        return None
    v = res.timeseries[name].to_numpy(dtype=np.float64)
    return v if np.isfinite(v).any() else None


def engine_running(res: ResultFile) -> np.ndarray:
    """Samples where the engine runs (``engine_state`` idle or running; all samples when the
    result has no engine state)."""
    state = series(res, "engine_state")
    if state is None:
        return np.ones(len(res.timeseries), dtype=bool)
    return running(state)


def judged_mask(res: ResultFile) -> np.ndarray:
    """Samples fit to judge: ``valid`` and ``sampling`` (each taken as 1 when not written)."""
    n = len(res.timeseries)
    mask = np.ones(n, dtype=bool)
    for name in ("valid", "sampling"):
        v = series(res, name)
        if v is not None:
            mask &= v > 0.5
    return mask


# ------------------------------------------------------------------------------------------
# steady points
# ------------------------------------------------------------------------------------------
def steady_windows(res: ResultFile) -> pd.DataFrame:
    """Start and end [s] of each steady point, numbered from 1 in time order.

    From ``/steady_points/`` (``start_s``, ``end_s``) when present, else from the runs of
    the ``steady`` series. Empty (columns ``point``, ``start_s``, ``end_s``) when neither.
    """
    tab = res.tables.get("steady_points")
    if tab is not None and len(tab) and {"start_s", "end_s"} <= set(tab.columns):
        start = tab["start_s"].to_numpy(dtype=np.float64)
        end = tab["end_s"].to_numpy(dtype=np.float64)
    else:
        st = series(res, "steady")
        if st is None:
            return pd.DataFrame({"point": [], "start_s": [], "end_s": []})
        t = res.timeseries["time"].to_numpy(dtype=np.float64)
        on = np.r_[False, st > 0.5, False]
        edges = np.flatnonzero(np.diff(on.astype(np.int8)))
        start, end = t[edges[0::2]], t[edges[1::2] - 1]
    order = np.argsort(start, kind="stable")
    return pd.DataFrame(
        {"point": np.arange(1, len(order) + 1), "start_s": start[order], "end_s": end[order]}
    )


def point_index(res: ResultFile, windows: pd.DataFrame | None = None) -> np.ndarray:
    """Per sample: the 0-based steady point it belongs to, or -1.

    A sample belongs to a point when it lies in the point's window, is flagged ``steady``
    (when that series exists) and is fit to judge (:func:`judged_mask`).
    """
    if windows is None:
        idx = _memo(res, ("point_index",), lambda: _point_index(res, steady_windows(res)))
        return idx.copy()
    return _point_index(res, windows)


def _point_index(res: ResultFile, w: pd.DataFrame) -> np.ndarray:
    t = res.timeseries["time"].to_numpy(dtype=np.float64)
    if not len(w):
        return np.full(t.size, -1, dtype=np.intp)
    start = w["start_s"].to_numpy(dtype=np.float64)
    end = w["end_s"].to_numpy(dtype=np.float64)
    idx = np.searchsorted(start, t, side="right") - 1
    inside = (idx >= 0) & (t <= end[np.clip(idx, 0, None)])
    st = series(res, "steady")
    if st is not None:
        inside &= st > 0.5
    inside &= judged_mask(res)
    return np.where(inside, idx, -1)


def _group_means(
    key: np.ndarray, n_groups: int, values: dict[str, np.ndarray | None]
) -> dict[str, np.ndarray]:
    """Mean of each value over the samples of each group ``key`` 0..n_groups-1 (key -1: no
    group; finite samples only; NaN for a group without any)."""
    out: dict[str, np.ndarray] = {}
    for name, v in values.items():
        if v is None:
            out[name] = np.full(n_groups, np.nan)
            continue
        x = np.asarray(v, dtype=np.float64)
        out[name] = group_mean_std(key, (key >= 0) & np.isfinite(x), x, n_groups)[0]
    return out


def _run_keys(raw: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``np.unique(raw, return_inverse=True)``, without a sort when ``raw`` is already in
    order (time-ordered samples)."""
    if raw.size and bool(np.all(raw[1:] >= raw[:-1])):
        new = np.r_[True, raw[1:] != raw[:-1]]
        return raw[new], np.cumsum(new) - 1
    uniq, key = np.unique(raw, return_inverse=True)
    return uniq, key.ravel()


#: Quantities averaged per steady point.
POINT_QUANTITIES = (
    "speed",
    "torque",
    "brake_power",
    "fuel_mass_flow",
    "fuel_mass_flow_carbon",
    "air_mass_flow",
    "air_dry_mass_flow",
    "lambda_flow",
    "lambda_carbon",
    "lambda_oxygen",
    "lambda_sensor",
    "exhaust_dewpoint",
    "sample_line_temperature",
    *RESIDUALS,
    "residual_fuel_flow",
    *EMISSIONS,
)


def steady_point_stats(res: ResultFile) -> pd.DataFrame:
    """One row per steady point: number, window, clock mid-time, samples used, and the mean of
    every quantity of :data:`POINT_QUANTITIES` present (NaN columns when absent), plus
    ``carbon_balance_error`` (fraction,
    :func:`pipeline.balance.emissions.carbon_balance_error_rate`) when the fuel flows are
    there. Empty when the result has no steady points.
    """
    return _memo(res, ("steady_point_stats",), lambda: _steady_point_stats(res)).copy()


def _steady_point_stats(res: ResultFile) -> pd.DataFrame:
    w = steady_windows(res)
    n = len(w)
    key = point_index(res)
    means = _group_means(key, n, {q: series(res, q) for q in POINT_QUANTITIES})
    out = w.copy()
    out["t_mid_s"] = 0.5 * (out["start_s"] + out["end_s"])
    out["samples"] = np.bincount(key[key >= 0], minlength=n) if n else np.array([], int)
    for q, v in means.items():
        out[q] = v
    fuel = res.attrs.get("fuel") if isinstance(res.attrs.get("fuel"), dict) else {}
    w_c = float(fuel.get("w_c", np.nan))
    bal = res.attrs.get("balance") if isinstance(res.attrs.get("balance"), dict) else {}
    x_co2 = float(bal.get("intake_co2_dry_ppm", X_CO2_AIR_DRY * 1e6)) * 1e-6
    has_air = series(res, "air_dry_mass_flow") is not None
    air = out["air_dry_mass_flow"].to_numpy() if has_air else None
    if np.isfinite(w_c) and n:
        out["carbon_balance_error"] = carbon_balance_error_rate(
            out["fuel_mass_flow"].to_numpy(), out["fuel_mass_flow_carbon"].to_numpy(), air, w_c,
            x_co2,
        )
    else:
        out["carbon_balance_error"] = out["residual_fuel_flow"]
    return out


def steady_blocks(res: ResultFile, block_s: float = BLOCK_S) -> pd.DataFrame:
    """Means over blocks of ``block_s`` inside each steady point (judged samples only).

    Columns: ``point`` (1-based), ``t_s`` (mean time of the block's samples), ``samples`` and
    the mean of each quantity of :data:`POINT_QUANTITIES` present. Used to show the spread and
    the time trend inside points without scattering every sample.
    """
    key = ("steady_blocks", float(block_s))
    return _memo(res, key, lambda: _steady_blocks(res, block_s)).copy()


def _steady_blocks(res: ResultFile, block_s: float) -> pd.DataFrame:
    w = steady_windows(res)
    idx = point_index(res)
    t = res.timeseries["time"].to_numpy(dtype=np.float64)
    use = idx >= 0
    if not use.any():
        return pd.DataFrame({"point": [], "t_s": [], "samples": []})
    start = w["start_s"].to_numpy(dtype=np.float64)
    blk = np.floor((t - start[np.clip(idx, 0, None)]) / block_s).astype(np.int64)
    raw = np.where(use, idx.astype(np.int64) * (1 << 32) + blk, -1)
    uniq, key = _run_keys(raw[use])
    full_key = np.full(t.size, -1, dtype=np.intp)
    full_key[use] = key
    m = len(uniq)
    means = _group_means(full_key, m, {"t_s": t} | {q: series(res, q) for q in POINT_QUANTITIES})
    out = pd.DataFrame({"point": (uniq >> 32) + 1, "samples": np.bincount(key, minlength=m)})
    for q, v in means.items():
        out[q] = v
    return out


def time_blocks(
    res: ResultFile, name: str, block_s: float = BLOCK_S
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Block statistics of one series over steady, judged samples on a fixed ``block_s`` grid.

    Returns (block mean time [s], mean, min, max) for blocks with at least one sample.
    """
    key = ("time_blocks", name, float(block_s))
    tm, mean, lo, hi = _memo(res, key, lambda: _time_blocks(res, name, block_s))
    return tm.copy(), mean.copy(), lo.copy(), hi.copy()


def _time_blocks(
    res: ResultFile, name: str, block_s: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    v = series(res, name)
    t = res.timeseries["time"].to_numpy(dtype=np.float64)
    use = point_index(res) >= 0
    if v is None:
        e = np.array([])
        return e, e, e, e
    use &= np.isfinite(v) & np.isfinite(t)
    if not use.any():
        e = np.array([])
        return e, e, e, e
    tu, vu = t[use], v[use]
    b = np.floor(tu / block_s).astype(np.int64)
    uniq, key = _run_keys(b)
    m = len(uniq)
    count = np.bincount(key, minlength=m)
    tm = np.bincount(key, weights=tu, minlength=m) / count
    mean = np.bincount(key, weights=vu, minlength=m) / count
    if m and key[-1] == m - 1 and bool(np.all(key[1:] >= key[:-1])):
        start = np.flatnonzero(np.r_[True, key[1:] != key[:-1]])
        lo = np.minimum.reduceat(vu, start)
        hi = np.maximum.reduceat(vu, start)
    else:
        lo = np.full(m, np.inf)
        hi = np.full(m, -np.inf)
        np.minimum.at(lo, key, vu)
        np.maximum.at(hi, key, vu)
    return tm, mean, lo, hi


# ------------------------------------------------------------------------------------------
# flags, verdicts
# ------------------------------------------------------------------------------------------
def _suspects(flags: pd.DataFrame) -> list[list[str]]:
    return [[p for p in str(s).split("|") if p] for s in flags["suspect"].astype(str)]


def point_verdicts(points: pd.DataFrame, flags: pd.DataFrame, tol: float) -> list[str]:
    """A short verdict per steady point: ``ok``, or the fault flags overlapping it as
    ``check: suspect``, or ``beyond +-tol`` when a flow/exhaust residual mean exceeds ``tol``
    without a flag."""
    n = len(points)
    if n == 0:
        return []
    a = points["start_s"].to_numpy(dtype=np.float64)
    b = points["end_s"].to_numpy(dtype=np.float64)
    out = ["ok"] * n
    if len(flags):
        fault = flags[flags["check"].astype(str).isin(FAULT_CHECKS + ("out_of_range",))]
        fs = fault["start_s"].to_numpy(dtype=np.float64)
        fe = fault["end_s"].to_numpy(dtype=np.float64)
        # a flag counts for a point when it covers at least MIN_OVERLAP of the point
        cover = np.minimum(fe[None, :], b[:, None]) - np.maximum(fs[None, :], a[:, None])
        length = np.maximum(b - a, 1.0)[:, None]
        overlap = cover >= MIN_OVERLAP * length
        short = {"lambda_disagreement": "disagree", "out_of_range": "range"}
        checks = [short.get(c, c) for c in fault["check"].astype(str)]
        sus = [x.replace("_mass_flow", "").replace("|", "/") for x in fault["suspect"].astype(str)]
        for i in np.flatnonzero(overlap.any(axis=1)):
            by_suspect: dict[str, list[str]] = {}
            for j in np.flatnonzero(overlap[i]):
                by_suspect.setdefault(sus[j], [])
                if checks[j] not in by_suspect[sus[j]]:
                    by_suspect[sus[j]].append(checks[j])
            out[i] = "; ".join(
                "+".join(sorted(c)) + (f": {x}" if x else "") for x, c in by_suspect.items()
            )
    worst = np.zeros(n)
    for r in ("residual_carbon_flow", "residual_oxygen_flow", "residual_oxygen_carbon"):
        if r in points:
            worst = np.fmax(worst, np.abs(points[r].to_numpy(dtype=np.float64)))
    for i in np.flatnonzero((worst > tol) & np.array([v == "ok" for v in out])):
        out[i] = f"beyond \u00b1{100 * tol:.0f} %"
    return out


def instrument_verdicts(res: ResultFile) -> list[Verdict]:
    """The verdicts of the night, as the checks stage stored them in ``/verdicts``.

    A result written before that table existed is judged from its ``/flags`` by the same
    engine (:func:`pipeline.checks.verdicts.judge`).
    """
    table = res.tables.get("verdicts")
    if table is not None:
        return verdicts_from_table(table)
    core = list(CORE_INSTRUMENTS)
    if series(res, "lambda_sensor") is not None:
        core.append("lambda_sensor")
    t = res.timeseries["time"].to_numpy(dtype=np.float64)
    return judge(res.flags, core, drift=res.tables.get("drift"), start_time=res.start_time,
                 end_s=float(t[-1]) if t.size else float("nan"))


#: Most lines per check in the notes and flag lists of the summaries (all are in /flags).
NOTES_PER_CHECK = 3


def availability_notes(res: ResultFile) -> list[str]:
    """Sentences on data availability (gaps, analyzers not sampling, engine stops, clock): at
    most :data:`NOTES_PER_CHECK` per check, then how many more there are."""
    flags = res.flags
    if not len(flags):
        return []
    notes = []
    avail = flags[flags["check"].astype(str).isin(AVAILABILITY_CHECKS)]
    for check, rows in avail.groupby(avail["check"].astype(str), sort=False):
        what = {
            "data_gap": "No data (logger gap)",
            "analyzer_not_sampling": "Analyzers not sampling exhaust (zero/span/purge)",
            "engine_off": "Engine off",
            "time_irregular": "Irregular time stamps",
        }.get(check, check)
        for a, b in zip(rows["start_s"].head(NOTES_PER_CHECK), rows["end_s"].head(NOTES_PER_CHECK),
                        strict=True):
            a, b = float(a), float(b)
            notes.append(
                f"{what} from {clock(res, a)} to {clock(res, b)} ({duration_text(b - a)})."
            )
        if len(rows) > NOTES_PER_CHECK:
            total = float((rows["end_s"] - rows["start_s"]).sum())
            notes.append(f"... and {len(rows) - NOTES_PER_CHECK} more {check} intervals "
                         f"({duration_text(total)} in all; see /flags).")
    return notes


# ------------------------------------------------------------------------------------------
# key numbers
# ------------------------------------------------------------------------------------------
def _integral_kg(res: ResultFile, name: str, factor: float) -> float:
    """Time integral of a rate over the night [kg], NaN samples skipped, trapezoid rule."""
    v = series(res, name)
    if v is None:
        return float("nan")
    t = res.timeseries["time"].to_numpy(dtype=np.float64)
    dt = np.diff(t)
    mid = 0.5 * (v[1:] + v[:-1])
    good = np.isfinite(mid) & np.isfinite(dt) & (dt > 0) & (dt < 60.0)
    return float(np.sum(mid[good] * dt[good]) / 3600.0 * factor)


def key_numbers(res: ResultFile, points: pd.DataFrame | None = None) -> dict[str, Any]:
    """The night's key numbers for the summary (plain floats/ints/str; NaN when unknown)."""
    t = res.timeseries["time"].to_numpy(dtype=np.float64)
    pts = steady_point_stats(res) if points is None else points
    judged = judged_mask(res)
    k: dict[str, Any] = {
        "duration_h": float((t[-1] - t[0]) / 3600.0) if t.size > 1 else 0.0,
        "samples": int(t.size),
        "samples_judged": int(judged.sum()),
        "steady_points": int(len(pts)),
        "steady_fraction": float((point_index(res) >= 0).mean()) if t.size else 0.0,
    }
    tol, tol_s, src = tolerance(res)
    k["tolerance_pct"] = 100.0 * tol
    k["tolerance_sensor_pct"] = 100.0 * tol_s
    k["tolerance_source"] = src
    for name in ("lambda_flow", "lambda_carbon", "lambda_oxygen", "lambda_sensor"):
        v = series(res, name)
        if v is not None:
            good = judged & np.isfinite(v)
            k[f"{name}_median"] = float(np.median(v[good])) if good.any() else float("nan")
    al = res.group_attrs.get("alignment", {})
    if "analyzer_delay_s" in al:
        k["analyzer_delay_s"] = float(al["analyzer_delay_s"])
        k["analyzer_delay_method"] = str(al.get("method", ""))
    if len(pts) and "carbon_balance_error" in pts:
        cbe = pts["carbon_balance_error"].to_numpy(dtype=np.float64)
        if np.isfinite(cbe).any():
            k["carbon_balance_error_pct_median"] = float(100.0 * np.nanmedian(cbe))
            k["carbon_balance_error_pct_max_abs"] = float(100.0 * np.nanmax(np.abs(cbe)))
    dew = series(res, "exhaust_dewpoint")
    if dew is not None:
        k["exhaust_dewpoint_max_degC"] = float(np.nanmax(dew))
        line = series(res, "sample_line_temperature")
        if line is not None:
            margin = line - dew
            k["condensation_margin_min_K"] = float(np.nanmin(margin))
    k["fuel_used_kg"] = _integral_kg(res, "fuel_mass_flow", 1.0)
    for name in EMISSIONS:
        if series(res, name) is not None:
            k[f"{name.removesuffix('_mass_flow')}_total_g"] = _integral_kg(res, name, 1.0)
    drift = res.tables.get("drift")
    if drift is not None and len(drift) and "residual" in drift:
        k["residual_noise_pct"] = {
            str(r["residual"]): float(r.get("noise_pct", np.nan)) for _, r in drift.iterrows()
        }
        k["min_detectable_drift_pct"] = {
            str(r["residual"]): float(r.get("min_detectable_drift_pct", np.nan))
            for _, r in drift.iterrows()
        }
    return k
