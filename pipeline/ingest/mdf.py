"""Read ASAM MDF4 measurement files through ``asammdf`` (optional ``mdf`` extra).

asammdf is imported lazily (it is LGPL and heavy); without it, reading an MDF file ends with a
message telling how to install the extra.

How an MDF file becomes one table (our policy):

- Only the mapped channels are read (``MDF.select``), never the whole file.
- Units are those of the channel metadata (``Signal.unit``), used when the config leaves a
  channel's unit implicit; an explicit config unit that disagrees is reported.
- The channels are put on one explicit time raster: ``[input] raster_s`` when given, else the
  median sample interval of the fastest mapped channel. The raster runs from the earliest to
  the latest sample of the mapped channels. Float channels are interpolated linearly; integer
  channels (status codes) hold their previous sample. A raster point before a channel's first
  or after its last sample, or inside a hole of more than 2.5 of the channel's own median
  intervals, is NaN (missing), never extrapolated or bridged.
- Time: the raster, in seconds relative to the file's start time, which is the run's absolute
  start (``meta.start_time``). The configured time column may name a master channel (e.g.
  ``time``); if it names nothing in the file, the raster is used with a note.
- Duplicate channel names (the same name in several channel groups): ``column = "name"``
  takes the occurrence with the most samples (the first of equals) and says so; each one is
  also available as ``name@<group index>``, e.g. ``column = "T_oil@2"``.
"""

from __future__ import annotations

import gc
import re
import sys
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..config import Config, InputOptions
from ..errors import ConfigError, InputDataError
from ..records import RunData
from .table import MAX_RASTER_ROWS, Source, build_run, resample

INSTALL_HINT = "install the mdf extra: pip install 'dynoqc[mdf]'"


def import_asammdf(path: Path) -> Any:
    """The ``asammdf`` module, or ConfigError (exit 2) telling how to install it."""
    try:
        import asammdf
    except ImportError:
        raise ConfigError(
            f"{path}: reading ASAM MDF files needs the optional package asammdf; "
            f"{INSTALL_HINT}."
        ) from None
    return asammdf


class _Occurrence:
    """One channel in one channel group."""

    def __init__(self, name: str, group: int, index: int, unit: str, samples: int) -> None:
        self.name, self.group, self.index, self.unit, self.samples = (
            name, group, index, unit, samples
        )


def _occurrences(path: Path, mdf: Any) -> tuple[list[_Occurrence], list[str]]:
    """Every data channel of every channel group, and the names of the master channels."""
    masters: dict[int, int] = dict(getattr(mdf, "masters_db", {}) or {})
    occurrences: list[_Occurrence] = []
    master_names: list[str] = []
    for gi, group in enumerate(mdf.groups):
        samples = int(getattr(group.channel_group, "cycles_nr", 0) or 0)
        for ci, ch in enumerate(group.channels):
            name = str(ch.name)
            if masters.get(gi) == ci:
                if name not in master_names:
                    master_names.append(name)
                continue
            unit = str(getattr(ch, "unit", "") or "")
            occurrences.append(_Occurrence(name, gi, ci, unit, samples))
    if not occurrences:
        raise InputDataError(f"{path}: the MDF file holds no data channels.")
    return occurrences, master_names


def _mdf_start(mdf: Any) -> tuple[datetime | None, str]:
    """The header start time (UTC) and where it came from."""
    start = getattr(mdf, "start_time", None)
    note = "MDF header start time"
    if not isinstance(start, datetime):
        return None, note
    if start.tzinfo is None:
        start = start.replace(tzinfo=UTC)
        note += " (no time zone flag; taken as UTC)"
    return start.astimezone(UTC), note


def _read_signals(
    path: Path, mdf: Any, keys: list[tuple[str, int, int]], notes: list[str]
) -> tuple[dict[tuple[str, int, int], tuple[np.ndarray, np.ndarray, bool]], list[float]]:
    """(time stamps, samples, hold) per channel key, in time order, and each channel's median
    step; a non-numeric channel is read as missing (noted)."""
    try:
        signals = mdf.select(list(keys), ignore_value2text_conversions=True)
    except Exception as exc:  # noqa: BLE001 - asammdf raises many types on corrupt data
        raise InputDataError(f"{path}: cannot read the MDF channels ({exc}).") from None
    data: dict[tuple[str, int, int], tuple[np.ndarray, np.ndarray, bool]] = {}
    steps: list[float] = []
    for key, sig in zip(keys, signals, strict=True):
        ts = np.asarray(sig.timestamps, dtype=np.float64)
        samples = np.asarray(sig.samples)
        if samples.ndim != 1 or samples.dtype.kind not in "iufb":
            notes.append(
                f"Channel '{key[0]}' (group {key[1]}) is not a numeric 1-D channel; it is "
                "read as missing."
            )
            samples = np.full(ts.shape, np.nan)
        hold = samples.dtype.kind in "iub"
        if ts.size > 1 and (np.diff(ts) < 0).any():
            notes.append(
                f"Channel '{key[0]}' (group {key[1]}): time stamps go backwards; its "
                "samples are taken in time order."
            )
            order = np.argsort(ts, kind="stable")
            ts, samples = ts[order], samples[order]
        data[key] = (ts, samples, hold)
        d = np.diff(ts)
        if (d > 0).any():
            steps.append(float(np.median(d[d > 0])))
    return data, steps


def _raster_grid(
    path: Path, spans: list[tuple[float, float]], steps: list[float],
    raster_cfg: float | None, notes: list[str],
) -> np.ndarray:
    """The common time raster: the configured step, else the fastest mapped channel's."""
    if not spans:
        raise InputDataError(f"{path}: the mapped MDF channels hold no samples.")
    t0 = min(s[0] for s in spans)
    t1 = max(s[1] for s in spans)
    if raster_cfg:
        raster = float(raster_cfg)
        notes.append(f"MDF channels resampled to the configured raster of {raster:g} s.")
    else:
        raster = min(steps) if steps else 1.0
        notes.append(
            f"MDF channels resampled to a raster of {raster:g} s (the fastest mapped "
            "channel); set [input] raster_s to choose another."
        )
    n = int(np.floor((t1 - t0) / raster + 1e-9)) + 1
    if n > MAX_RASTER_ROWS:
        raise InputDataError(
            f"{path}: a raster of {raster:g} s over {t1 - t0:g} s gives {n} rows; set a "
            "coarser [input] raster_s."
        )
    return t0 + raster * np.arange(n, dtype=np.float64)


def mdf_source(path: Path, options: InputOptions, mdf: Any) -> Source:
    """Describe an open ``asammdf.MDF`` as a :class:`~pipeline.ingest.table.Source`."""
    occurrences, master_names = _occurrences(path, mdf)
    names: list[str] = [master_names[0] if master_names else "time"]
    units: list[str | None] = ["s"]
    targets: list[_Occurrence | None] = [None]  # None: the time raster
    by_name: dict[str, list[_Occurrence]] = {}
    for occ in occurrences:
        by_name.setdefault(occ.name, []).append(occ)
    notes: list[str] = []
    for name, occs in by_name.items():
        best = max(occs, key=lambda o: o.samples)  # max keeps the first of equals
        names.append(name)
        units.append(best.unit or None)
        targets.append(best)
        if len(occs) > 1:
            for occ in occs:
                names.append(f"{name}@{occ.group}")
                units.append(occ.unit or None)
                targets.append(occ)
    start, start_note = _mdf_start(mdf)
    metadata = {"format": f"ASAM MDF {getattr(mdf, 'version', '?')}"}
    raster_cfg = getattr(options, "raster_s", None)

    def load(positions: list[int], text_cols: set[int]) -> dict[int, pd.Series]:
        wanted = [(p, targets[p]) for p in positions if targets[p] is not None]
        uniq = list(dict.fromkeys((o.name, o.group, o.index) for _, o in wanted if o))
        for p, occ in wanted:
            assert occ is not None
            if names[p] == occ.name and len(by_name[occ.name]) > 1:
                others = ", ".join(
                    f"group {o.group} ({o.samples} samples)" for o in by_name[occ.name]
                )
                notes.append(
                    f"Channel '{occ.name}' occurs in {len(by_name[occ.name])} channel groups "
                    f"({others}); group {occ.group} is used. Write column = "
                    f"\"{occ.name}@<group>\" to choose another."
                )
        data, steps = _read_signals(path, mdf, uniq, notes)
        spans = [(v[0][0], v[0][-1]) for v in data.values() if v[0].size]
        grid = _raster_grid(path, spans, steps, raster_cfg, notes)
        out: dict[int, pd.Series] = {}
        for p in positions:
            occ = targets[p]
            if occ is None:
                out[p] = pd.Series(grid)
            else:
                ts, samples, hold = data[(occ.name, occ.group, occ.index)]
                out[p] = pd.Series(resample(ts, samples, grid, hold))
        return out

    return Source(
        path=path,
        kind="MDF",
        names=names,
        file_units=units,
        header="the channels of the MDF file",
        load=load,
        metadata=metadata,
        start_time=start,
        start_source=start_note,
        fallback_time=0,
        notes=notes,
        rows_note=" in the MDF file",
    )


def open_mdf(path: Path) -> Any:
    """Open ``path`` with ``asammdf.MDF`` (InputDataError when it is not readable).

    asammdf leaves a half-built object behind when a file is corrupt, whose ``__del__``
    prints an "Exception ignored" traceback at exit; that one is silenced here (the user
    gets the one-sentence message only).
    """
    asammdf = import_asammdf(path)
    previous = sys.unraisablehook

    def quiet(unraisable: Any) -> None:
        obj = unraisable.object
        where = f"{getattr(obj, '__module__', '')} {getattr(type(obj), '__module__', '')}"
        if "asammdf" not in where:
            previous(unraisable)

    sys.unraisablehook = quiet
    try:
        try:
            return asammdf.MDF(path)
        except Exception as exc:  # noqa: BLE001 - asammdf raises many types on corrupt files
            text = str(exc).strip()
            msg = text.splitlines()[0] if text else type(exc).__name__
            msg = re.sub(r"'?<mmap\.mmap[^>]*>'?\s*", "", msg) or "corrupt file"
        gc.collect()  # the half-built object goes now, under the quiet hook
    finally:
        sys.unraisablehook = previous
    raise InputDataError(f"{path}: not a readable MDF file ({msg}).")


def read_mdf_run(path: Path, config: Config) -> RunData:
    """Read an ASAM MDF4 file into canonical units (contract of ``read_run``)."""
    path = Path(path)
    mdf = open_mdf(path)
    try:
        return build_run(mdf_source(path, config.input, mdf), config)
    finally:
        mdf.close()
