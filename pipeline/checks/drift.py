"""Drift of a residual against the night's own early baseline, without zero/span records.

Samples: steady intervals are cut into blocks of about ``drift_block_s``; the median residual
of each block is one sample (robust to spikes, and independent of the logging rate).

Statistic: a two-sided CUSUM (Page, "Continuous inspection schemes", Biometrika 41, 1954;
Montgomery, Introduction to Statistical Quality Control, ch. 9) on the block medians,
standardised by the baseline median and a robust noise scale. The noise scale follows the
residual's own noise: the larger of 1.4826 x MAD of the baseline blocks and of the
successive-difference estimate 1.4826 x MAD(diff)/sqrt(2) over the night (robust to a single
step or a slow ramp), floored at ``drift_noise_floor``. The 1.4826 factor makes the MAD a
consistent estimator of the normal standard deviation (common statistics).

Onset: the change point of the least-squares fit of "baseline, then a linear ramp to a new
level that holds" (a step is a ramp of zero length), searched over all blocks after the
baseline's first blocks (the CUSUM alarm is the gate, not the onset: noise can lift the CUSUM
before the real change). End: the last block still clearly off the baseline. Size: the fitted
new level; rate: level / ramp duration for a ramp, the slope of a straight line through the
drifted blocks for a step (about zero).

Minimum detectable drift: a persistent shift of delta noise units over the n blocks after the
baseline lifts the CUSUM by about n (delta - k); it alarms when that reaches h, so
MDD = noise (k + h / n), and never below ``drift_min_size`` nor ``drift_min_significance`` x
noise, the other two conditions for a report [D] (from the CUSUM definition).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..constants import MAD_TO_SIGMA
from ..records import columns_frame


def block_samples(
    time: np.ndarray,
    runs: np.ndarray,
    judged: np.ndarray,
    residuals: dict[str, np.ndarray],
    settings: dict,
) -> pd.DataFrame:
    """One row per block of steady data: point, t_start, t_end, t_mid, samples, residual medians.

    ``point`` is the index of the steady point the block belongs to.
    """
    n = len(time)
    block = np.full(n, -1, dtype=np.int64)
    point_of_block: list[int] = []
    next_id = 0
    for p, (i0, i1) in enumerate(runs):  # one iteration per steady point
        t0, t1 = time[i0], time[i1]
        nb = max(1, int(round((t1 - t0) / settings["drift_block_s"])))
        k = np.minimum(
            ((time[i0 : i1 + 1] - t0) / max(t1 - t0, 1e-9) * nb).astype(np.int64), nb - 1
        )
        block[i0 : i1 + 1] = next_id + k
        next_id += nb
        point_of_block += [p] * nb
    sel = (block >= 0) & judged
    df = columns_frame(
        {**{k: np.asarray(v, dtype=float)[sel] for k, v in residuals.items()}, "time": time[sel]}
    )
    g = df.groupby(block[sel])
    out = g[list(residuals)].median()
    out.insert(0, "samples", g["time"].size())
    out.insert(0, "t_mid", g["time"].median())
    out.insert(0, "t_end", g["time"].max())
    out.insert(0, "t_start", g["time"].min())
    out.insert(0, "point", np.asarray(point_of_block, dtype=np.int64)[out.index.to_numpy()])
    out = out[out["samples"] >= settings["drift_block_min_samples"]]
    return out.reset_index(drop=True)


@dataclass
class DriftResult:
    """Drift of one residual. Sizes and noise are fractions; times are s from run start."""

    residual: str
    baseline: float
    noise: float
    blocks: int
    detected: bool
    onset_s: float = float("nan")
    end_s: float = float("nan")
    size: float = float("nan")
    rate_per_h: float = float("nan")
    kind: str = ""
    alarm_s: float = float("nan")
    min_detectable: float = float("nan")
    significance: float = 0.0
    onset_window: tuple[float, float] = (float("nan"), float("nan"))
    onset_level: float = float("nan")


def robust_noise(
    values: np.ndarray, baseline: np.ndarray, floor: float, point: np.ndarray | None = None
) -> float:
    """Larger of the baseline MAD and the successive-difference MAD (as sigma), floored.

    Blocks of the same steady point share its operating-point bias, so when ``point`` ids are
    given and enough pairs exist, only differences between blocks of different points count.
    """
    base = values[baseline]
    s_base = MAD_TO_SIGMA * float(np.median(np.abs(base - np.median(base)))) if base.size else 0.0
    d = np.diff(values)
    if point is not None and d.size:
        between = np.diff(point) != 0
        if between.sum() >= 5:
            d = d[between]
    s_diff = (
        MAD_TO_SIGMA * float(np.median(np.abs(d - np.median(d)))) / np.sqrt(2.0) if d.size else 0.0
    )
    return max(s_base, s_diff, floor)


def cusum_alarm(z: np.ndarray, k: float, h: float) -> int:
    """Index of the first two-sided CUSUM alarm on standardised samples ``z`` (-1 if none)."""
    hi = lo = 0.0
    for i, zi in enumerate(z):  # one iteration per block (a few hundred at most)
        hi = max(0.0, hi + zi - k)
        lo = max(0.0, lo - zi - k)
        if hi >= h or lo >= h:
            return i
    return -1


def fit_change(t: np.ndarray, dev: np.ndarray, first: int, last: int) -> tuple[int, int, float]:
    """Least-squares change model for deviations ``dev`` from the baseline.

    The model is zero up to block ``c``, then a linear ramp reaching ``level`` at block ``e``
    and holding it (``e == c`` is a step at ``c``). ``c`` is searched in [first, last] and
    ``e`` in [c, end]; returns ``(c, e, level)``. Loops over the few hundred candidate blocks.
    """
    n = dev.size
    best = (np.inf, first, first, 0.0)
    total = float(dev @ dev)
    for c in range(first, last + 1):
        width = t[c:] - t[c]
        with np.errstate(divide="ignore", invalid="ignore"):
            # rows: candidate end e; columns: blocks from c on
            u = np.clip((t[None, c:] - t[c]) / width[:, None], 0.0, 1.0)
        u[0] = 1.0  # e == c: a step
        ud = u @ dev[c:]
        uu = np.einsum("ij,ij->i", u, u)
        sse = total - ud**2 / uu
        i = int(np.argmin(sse))
        if sse[i] < best[0]:
            best = (float(sse[i]), c, c + i, float(ud[i] / uu[i]))
    _, c, e, level = best
    return c, min(e, n - 1), level


def detect_drift(blocks: pd.DataFrame, residual: str, settings: dict) -> DriftResult:
    """Detect a persistent change of one residual in the block medians (see module docstring)."""
    ok = np.isfinite(blocks[residual].to_numpy()) if residual in blocks else np.zeros(0, bool)
    b_df = blocks[ok] if len(ok) else blocks.iloc[0:0]
    m = b_df[residual].to_numpy(dtype=float) if len(b_df) else np.empty(0)
    t = b_df["t_mid"].to_numpy(dtype=float) if len(b_df) else np.empty(0)
    n = m.size
    nmin = int(settings["drift_baseline_min_blocks"])
    if n < nmin + int(settings["drift_min_blocks"]):
        return DriftResult(residual, float("nan"), float("nan"), n, False)
    base = t < t[0] + settings["drift_baseline_s"]
    base[:nmin] = True
    nb = int(base.sum())
    b = float(np.median(m[base]))
    point = b_df["point"].to_numpy() if "point" in b_df else None
    s = robust_noise(m, base, settings["drift_noise_floor"], point)
    k, h = settings["drift_cusum_k"], settings["drift_cusum_h"]
    n_post = max(n - nb, 1)
    mdd = max(
        settings["drift_min_size"], settings["drift_min_significance"] * s, s * (k + h / n_post)
    )
    res = DriftResult(residual, b, s, n, False, min_detectable=mdd)
    z = (m - b) / s
    j = cusum_alarm(z, k, h)
    if j < 0:
        return res
    res.alarm_s = float(t[j])
    dev = m - b
    c, e_ramp, level = fit_change(
        t, dev, min(nmin, j), max(j, n - int(settings["drift_min_blocks"]))
    )
    if e_ramp == c + 1:  # a "ramp" over one block gap is a step inside block c + 1
        c = e_ramp
    kind = "step" if e_ramp == c else "ramp"
    off = np.abs(dev) >= max(2.0 * s, 0.5 * abs(level), 0.5 * settings["drift_min_size"])
    off[:c] = False
    if not off.any():
        return res
    e = int(max(np.flatnonzero(off)[-1], e_ramp))
    seg_t, seg_m = t[c : e + 1], m[c : e + 1]
    size = level
    rate = float(np.polyfit(seg_t, seg_m, 1)[0]) * 3600.0 if seg_t.size >= 2 else 0.0
    if kind == "ramp":
        rate = level / max(t[e_ramp] - t[c], 1e-9) * 3600.0
    # Onset, reported conservatively (not before the data show the change): a step at c
    # moved the median of block c, so it happened by the block's middle; a ramp from c is
    # zero at the middle of block c and nonzero at the middle of block c + 1 (a step inside
    # block c + 1 also fits as a short ramp), so it is reported from there.
    onset = float(
        b_df["t_mid"].iloc[c] if kind == "step" else b_df["t_mid"].iloc[min(c + 1, n - 1)]
    )
    res.onset_s = onset
    # window for the sample-level refinement: from the last block before the change to the
    # end of the first block that moved; the level there is that block's own deviation
    first = c if kind == "step" else min(c + 1, n - 1)
    if kind == "step":
        t_lo = float(b_df["t_end"].iloc[c - 1]) if c > 0 else float(b_df["t_start"].iloc[c])
    else:
        t_lo = float(b_df["t_mid"].iloc[c])
    res.onset_window = (t_lo, float(b_df["t_end"].iloc[first]))
    res.onset_level = float(dev[first]) if dev[first] * size > 0 else size
    res.end_s = float(b_df["t_end"].iloc[e])
    res.size = size
    res.rate_per_h = rate
    res.kind = kind
    res.significance = abs(size) / s
    res.detected = bool(
        abs(size) >= max(settings["drift_min_size"], settings["drift_min_significance"] * s)
        and (e - c + 1) >= settings["drift_min_blocks"]
    )
    return res


def refine_step_onset(
    time: np.ndarray, r: np.ndarray, mask: np.ndarray, result: DriftResult
) -> float:
    """Sample-level onset of a step inside the window found on blocks (end of the last unmoved
    block to the end of the first moved one): the split that minimises the squared error of
    "baseline before, baseline + the block's deviation after", by suffix sums (vectorised).
    Returns the onset [s]."""
    t_lo, t_hi = result.onset_window
    if not (np.isfinite(t_lo) and np.isfinite(t_hi)):
        return result.onset_s
    sel = mask & (time > t_lo) & (time <= t_hi) & np.isfinite(r)
    if sel.sum() < 3:
        return result.onset_s
    ts = time[sel]
    x = r[sel] - result.baseline
    level = result.onset_level if np.isfinite(result.onset_level) else result.size
    suffix = np.cumsum(x[::-1])[::-1]  # sum of x[k:]
    n_after = x.size - np.arange(x.size)
    cost = n_after * level**2 - 2.0 * level * suffix
    k = int(np.argmin(cost))
    return float(ts[k])


def drift_table(results: list[DriftResult]) -> pd.DataFrame:
    """The ``drift`` table: one row per residual (sizes and rates in %)."""
    rows = [
        {
            "residual": r.residual,
            "baseline": r.baseline,
            "noise_pct": 100.0 * r.noise,
            "blocks": r.blocks,
            "onset_s": r.onset_s if r.detected else np.nan,
            "end_s": r.end_s if r.detected else np.nan,
            "size_pct": 100.0 * r.size if r.detected else np.nan,
            "rate_pct_per_h": 100.0 * r.rate_per_h if r.detected else np.nan,
            "kind": r.kind if r.detected else "",
            "min_detectable_drift_pct": 100.0 * r.min_detectable,
            "detected": int(r.detected),
        }
        for r in results
    ]
    cols = [
        "residual",
        "baseline",
        "noise_pct",
        "blocks",
        "onset_s",
        "end_s",
        "size_pct",
        "rate_pct_per_h",
        "kind",
        "min_detectable_drift_pct",
        "detected",
    ]
    return pd.DataFrame(rows, columns=cols)
