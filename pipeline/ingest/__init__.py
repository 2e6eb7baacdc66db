"""Ingest stage: read a logger export, map its columns, convert to canonical units.

Public entry point :func:`read_run`. The file format is found from the file's first bytes
(:func:`detect_format`): CSV/TSV text (layout detection in :mod:`.sniff`, also used by
``dynoqc inspect``; parsing in :mod:`.csv`), Apache Parquet (:mod:`.parquet`) or ASAM MDF4
(:mod:`.mdf`, optional ``mdf`` extra). Mapping, units, cell counts and the time base are
shared by all formats (:mod:`.table`).
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pandas as pd

from ..config import Config, InputOptions
from ..errors import InputDataError
from ..records import RunData, RunMeta
from .delimited import read_csv_run
from .sniff import MISSING_MARKERS, Layout, sniff
from .table import PHYSICAL_LIMITS, Source, monotone_time, split_name_unit

__all__ = [
    "MISSING_MARKERS", "PHYSICAL_LIMITS", "Layout", "Source", "detect_format", "monotone_time",
    "open_source", "read_run", "sniff", "split_name_unit",
]

_SUFFIX_FORMAT = {".parquet": "parquet", ".pq": "parquet", ".mf4": "mdf", ".mdf": "mdf"}


def detect_format(path: Path) -> str:
    """``"csv"``, ``"parquet"`` or ``"mdf"`` from the file's first bytes (magic numbers).

    Raises InputDataError for a missing, empty or non-regular file, and for a file whose name
    promises Parquet or MDF but whose content is not.
    """
    path = Path(path)
    if not path.exists():
        raise InputDataError(f"{path}: file not found.")
    if not path.is_file():
        raise InputDataError(f"{path}: not a file.")
    if path.stat().st_size == 0:
        raise InputDataError(f"{path}: the file is empty.")
    with open(path, "rb") as fh:
        magic = fh.read(8)
    if magic[:4] == b"PAR1":
        return "parquet"
    if magic[:3] in (b"MDF", b"UnF"):  # "MDF     " (finalised) / "UnFinMF " (unfinalised)
        return "mdf"
    expected = _SUFFIX_FORMAT.get(path.suffix.lower())
    if expected is not None:
        what = "a Parquet" if expected == "parquet" else "an ASAM MDF"
        raise InputDataError(
            f"{path}: the name says {what} file, but the content is not one (its first bytes "
            f"are {magic!r})."
        )
    return "csv"


def read_run(path: Path, config: Config) -> RunData:
    """Read one logged run into canonical units on one time base.

    Formats (found from the content, :func:`detect_format`):

    - CSV/TSV text exports (``,`` ``;`` tab or ``|`` delimited; UTF-8, UTF-8 with BOM, UTF-16
      with BOM, cp1252/Latin-1), plain or gzip-compressed (``.csv.gz``), with optional
      comment/metadata lines (``#``, ``//``, ``key: value``, ``key;value``) above a names row
      and an optional units row (or units in the names: ``Speed [rpm]``, ``Speed (rpm)``,
      ``Speed/rpm``). ``[input]`` in the config overrides the detected delimiter, decimal
      mark, encoding and units row.
    - Apache Parquet: units from the config, else from the field metadata (``unit`` /
      ``units``); schema metadata as the file's metadata (:mod:`.parquet`).
    - ASAM MDF4 through asammdf (``pip install 'dynoqc[mdf]'``): units from the channel
      metadata, one explicit raster, duplicate channel names resolved and reported, the
      header start time kept (:mod:`.mdf`).

    The result frame has float64 ``time`` (s) and one float64 column per mapped quantity in
    canonical units (quantities.INPUTS; THC multiplied by its ``carbon_number`` to a C1
    basis; ``value`` channels as constant columns), on a RangeIndex.

    Cells policy: empty cells and the markers in :data:`MISSING_MARKERS` are missing values
    (counted per column in ``meta.warnings``); other non-numeric cells, infinities and
    readings outside :data:`PHYSICAL_LIMITS` (logger sentinels such as -9999 or 1e30) become
    NaN and are counted per quantity in ``meta.bad_cells`` with a warning naming the column
    and an example. Negative flows and concentrations are kept as logged and counted in a
    warning; rows where the fuel flow reads zero or less are counted in a warning (lambda
    from the flows is NaN there). A channel other than time and the two flows may be entirely
    empty (a warning; its derived values are NaN).

    Time policy (see :func:`monotone_time`): time is elapsed seconds converted with the
    channel's unit (``format = "seconds"``) or ISO 8601 time stamps / a timestamp column
    (``format = "iso8601"``, detected when not given), then seconds from the first sample
    with ``meta.start_time`` the first time stamp in UTC. For elapsed seconds the values are
    kept as logged and the start time comes from the container (MDF header) or a metadata
    line ``start_time`` / ``start`` / ``date`` (ISO 8601). Naive time stamps are read in
    ``[input] timezone`` (else taken as UTC, with a warning). Rows without a readable time are
    dropped; rows repeating the previous time are dropped (first kept); a backward step in
    time is taken as a logger restart and the segment is shifted to follow on. Every dropped
    row is counted in ``meta.rows_dropped`` with a warning, so ``rows_read - rows_dropped``
    is the number of rows of the frame.

    Raises InputDataError (exit 3) for a missing, empty, binary or header-only file, a mapped
    column not in the file (with close matches), or a time/fuel/air flow column without any
    number; ConfigError (exit 2) for a unit that does not fit its quantity or a missing
    optional reader (asammdf). The input file is only read, never written. A file that
    changes while it is read (a logger still writing it) is refused (exit 3): the recorded
    ``source_sha256`` then could not stand for the bytes that were read.
    """
    path = Path(path)
    before = _stamp(path)
    fmt = detect_format(path)
    if fmt == "parquet":
        from .parquet import read_parquet_run

        run = read_parquet_run(path, config)
    elif fmt == "mdf":
        from .mdf import read_mdf_run

        run = read_mdf_run(path, config)
    else:
        run = read_csv_run(path, config)
    if _stamp(path) != before:
        raise InputDataError(
            f"{path}: the file changed while it was read (a logger still writing it?); "
            "process it once the logger has closed it."
        )
    return run


def _stamp(path: Path) -> tuple[int, int]:
    """(size, modification time in ns) of a file, to notice a change while it is read."""
    try:
        st = path.stat()
    except OSError:
        return (-1, -1)
    return (st.st_size, st.st_mtime_ns)


@contextmanager
def open_source(path: Path, options: InputOptions | None = None) -> Iterator[Source]:
    """The file as a :class:`~pipeline.ingest.table.Source` of any supported format (used by
    ``dynoqc inspect`` to see every column); the file is closed on exit."""
    path = Path(path)
    options = options or InputOptions()
    fmt = detect_format(path)
    if fmt == "parquet":
        from .parquet import parquet_source

        yield parquet_source(path)
    elif fmt == "mdf":
        from .mdf import mdf_source, open_mdf

        mdf = open_mdf(path)
        try:
            yield mdf_source(path, options, mdf)
        finally:
            mdf.close()
    else:
        from .delimited import csv_source

        yield csv_source(path, sniff(path, options))


def read_joined(paths: list[Path], config: Config) -> RunData:
    """Read rollover files of one night (the logger split it) as one run.

    Each file is read with :func:`read_run`; the files are put in the order of their clocks
    (absolute start times, which each file must give), their rows on one time base from the
    first file's start. Rows of a file that overlap the previous file's span are dropped (the
    earlier file's are kept); gaps between files are noted and become ``data_gap`` flags.
    ``meta.sha256`` is the SHA-256 of the files' own digests in that order (each file's digest
    is in ``meta.metadata["joined_files"]``).
    """
    import hashlib
    import json

    runs = [read_run(Path(p), config) for p in paths]
    missing = [r.meta.source.name for r in runs if r.meta.start_time is None]
    if missing:
        raise InputDataError(
            f"--join needs the absolute start time of every file, to put them in order; "
            f"{', '.join(missing)} give(s) none (add a start_time metadata line or ISO 8601 "
            "time stamps)."
        )
    runs.sort(key=lambda r: r.meta.start_time)
    t0 = runs[0].meta.start_time
    frames: list[pd.DataFrame] = []
    notes: list[str] = []
    end = -np.inf
    for r in runs:
        offset = (r.meta.start_time - t0).total_seconds()
        f = r.frame.copy()
        f["time"] = f["time"].to_numpy() + offset
        t = f["time"].to_numpy()
        overlap = t <= end
        if overlap.any():
            notes.append(f"{r.meta.source.name} overlaps the previous file by "
                         f"{end - t[0]:.1f} s; its {int(overlap.sum())} overlapping row(s) "
                         "were dropped (the earlier file's rows are kept).")
            f = f[~overlap]
        elif frames and t.size and t[0] - end > 0:
            step = float(np.median(np.diff(t))) if t.size > 1 else 0.0
            if t[0] - end > 3.0 * step:
                notes.append(f"{t[0] - end:.1f} s without rows between the previous file "
                             f"and {r.meta.source.name}.")
        if len(f):
            end = max(end, float(f["time"].iloc[-1]))
            frames.append(f)
    frame = pd.concat(frames, ignore_index=True)
    meta = runs[0].meta
    digest = hashlib.sha256("".join(r.meta.sha256 for r in runs).encode()).hexdigest()
    joined = RunMeta(
        source=meta.source,
        sha256=digest,
        start_time=t0,
        rows_read=sum(r.meta.rows_read for r in runs),
        rows_dropped=sum(r.meta.rows_read for r in runs) - len(frame),
        units_in=dict(meta.units_in),
        columns_in=dict(meta.columns_in),
        bad_cells={q: sum(r.meta.bad_cells.get(q, 0) for r in runs)
                   for q in {k for r in runs for k in r.meta.bad_cells}},
        missing_cells={q: sum(r.meta.missing_cells.get(q, 0) for r in runs)
                       for q in {k for r in runs for k in r.meta.missing_cells}},
        metadata={**meta.metadata, "joined_files": json.dumps(
            [{"file": r.meta.source.name, "sha256": r.meta.sha256,
              "start_utc": r.meta.start_time.isoformat()} for r in runs])},
        warnings=[f"{len(runs)} rollover files joined into one night: "
                  + ", ".join(r.meta.source.name for r in runs) + "."]
        + [f"{r.meta.source.name}: {w}" for r in runs for w in r.meta.warnings] + notes,
        update_rows=dict(meta.update_rows),
    )
    return RunData(frame=frame, meta=joined)
