"""Ingest stage: read a logger export, map its columns, convert to canonical units.

Public entry point :func:`read_run`. Layout detection is in :mod:`.sniff` (also used by
``dynoqc inspect``), parsing in :mod:`.csv`.
"""

from __future__ import annotations

from pathlib import Path

from ..config import Config
from ..data import RunData
from .csv import monotone_time, read_csv_run, split_name_unit
from .sniff import MISSING_MARKERS, Layout, sniff

__all__ = ["MISSING_MARKERS", "Layout", "monotone_time", "read_run", "sniff", "split_name_unit"]


def read_run(path: Path, config: Config) -> RunData:
    """Read one logged run into canonical units on one time base.

    Reads CSV/TSV text exports (``,`` ``;`` tab or ``|`` delimited; UTF-8, UTF-8 with BOM,
    UTF-16 with BOM or cp1252), plain or gzip-compressed (``.csv.gz``), with optional
    comment/metadata lines (``#``, ``//``, ``key: value``, ``key;value``) above a names row
    and an optional units row (or units in the names: ``Speed [rpm]``, ``Speed (rpm)``,
    ``Speed/rpm``). ``[input]`` in the config overrides the detected delimiter, decimal mark,
    encoding and units row.

    The result frame has float64 ``time`` (s) and one float64 column per mapped quantity in
    canonical units (quantities.INPUTS; THC multiplied by its ``carbon_number`` to a C1
    basis; ``value`` channels as constant columns), on a RangeIndex.

    Cells policy: empty cells and the markers in :data:`MISSING_MARKERS` are missing values
    (counted per column in ``meta.warnings``); other non-numeric cells (and infinities) become
    NaN and are counted in ``meta.bad_cells`` with a warning naming the column and an example.

    Time policy (see :func:`monotone_time`): time is elapsed seconds converted with the
    channel's unit (``format = "seconds"``) or ISO 8601 time stamps (``format = "iso8601"``,
    detected when not given), then seconds from the first sample with ``meta.start_time`` the
    first time stamp in UTC. For elapsed seconds the values are kept as logged and a metadata
    line ``start_time`` / ``start`` / ``date`` (ISO 8601) sets ``meta.start_time``. Naive time
    stamps are read in ``[input] timezone`` (else taken as UTC, with a warning). Rows without
    a readable time are dropped; rows repeating the previous time are dropped (first kept); a
    backward step in time is taken as a logger restart and the segment is shifted to follow
    on. Every dropped row is counted in ``meta.rows_dropped`` with a warning.

    Raises InputDataError (exit 3) for a missing, empty, binary or header-only file, a mapped
    column not in the file (with close matches), or a time/fuel/air flow column without any
    number; ConfigError (exit 2) for a unit that does not fit its quantity. The input file is
    only read, never written.
    """
    return read_csv_run(Path(path), config)
