"""Write the HDF5 result file (DESIGN.md "Result file (contract)").

Layout written by :func:`write_result`::

    /                      root attributes: provenance from ``ProcessResult.attrs`` plus
                           ``Conventions = "CF-1.10"`` (dict values stored as JSON text)
    /timeseries/time       float64 [s]; dimension scale; ``units`` = ``seconds since <UTC>``
                           when ``attrs["start_time_utc"]`` is known, else ``s``
    /timeseries/<series>   1-D float64, gzip + shuffle, chunked, fill value NaN,
                           attributes ``units``, ``long_name`` (+ any given), time attached
    /flags/<column>        the flags table as equal-length 1-D columns (FLAG_COLUMNS first)
    /<table>/<column>      every other table, e.g. ``/steady_points/``, the same way
    /<group>               attribute-only groups, e.g. ``/alignment``

Tables are groups of 1-D columns, never compound types: compound types with string members
are skipped by netCDF/xarray readers (ECOSYSTEM.md §3.3). Strings are variable-length UTF-8.
Missing values are NaN; infinite values are written as NaN.

The file is written to a temporary name in the target directory and renamed when complete, so
a file at the final name is always whole (ECOSYSTEM.md §3.2).

Speed: compressing ~50 float64 series of a 12 h / 10 Hz night (~180 MB) is most of the cost of
writing. The time-series chunks are therefore encoded here, in a thread pool (deflate releases
the GIL), and stored with ``write_direct_chunk``: each chunk is byte-shuffled exactly as the
HDF5 shuffle filter does and deflated into a zlib stream, so the datasets carry the standard
``shuffle`` + ``gzip`` filter pipeline and any HDF5 reader (h5py, h5dump, HDFView, MATLAB,
netCDF) decodes them without plugins. The deflate encoder is the ISA-L one when the optional
``isal`` package is installed (about ten times faster than zlib, files ~3 % larger), else the
standard library's zlib at :data:`GZIP_LEVEL`. Either way the stream is plain deflate; the
``compression_opts`` stored with the filter (:data:`GZIP_LEVEL`) is the level HDF5 itself would
use if it rewrote a chunk, and readers ignore it.
"""

from __future__ import annotations

import json
import os
import zlib
from collections import deque
from collections.abc import Callable, Iterator, Mapping
from concurrent.futures import Future, ThreadPoolExecutor
from datetime import UTC, date, datetime
from pathlib import Path
from typing import Any

import h5py
import numpy as np
import pandas as pd

from ..atomic import atomic_path
from ..quantities import describe, table_column
from ..records import FLAG_COLUMNS, ProcessResult

#: CF conventions version declared in the root attributes.
CONVENTIONS = "CF-1.10"

#: HDF5 object format bounds: readable by HDF5 >= 1.10 (ECOSYSTEM.md §3.1).
LIBVER = ("earliest", "v110")

#: Samples per chunk for time series (64 Ki float64 = 512 KiB, ECOSYSTEM.md §3.1).
CHUNK_SAMPLES = 65536

#: gzip level for time series (portable: every HDF5 build has deflate). The level recorded in
#: the filter pipeline, and the one the standard-library encoder uses.
GZIP_LEVEL = 4

#: ISA-L deflate level (0-3) used instead when the ``isal`` package is installed: its level 1
#: gave chunks ~3 % larger than zlib level 4 at a tenth of the time (benchmarks/). The filter
#: pipeline then records gzip level 1, the zlib level of comparable effort (readers ignore
#: the level; it is recorded so the file says how it was made).
ISAL_LEVEL = 1
ISAL_RECORDED_LEVEL = 1

#: Most threads that encode time-series chunks by default (one per available CPU up to this).
MAX_WRITE_THREADS = 4

#: Units and long names of the flags table columns.
FLAG_COLUMN_ATTRS: dict[str, dict[str, str]] = {
    "start_s": {"units": "s", "long_name": "start of the flagged interval, time since start"},
    "end_s": {"units": "s", "long_name": "end of the flagged interval, time since start"},
    "check": {"long_name": "name of the check that raised the flag"},
    "suspect": {"long_name": "suspected instrument(s), canonical channel names, |-separated"},
    "severity": {"long_name": "severity: info, warning or error"},
    "value": {"long_name": "size of the finding, in the units given by the message"},
    "message": {"long_name": "one-sentence description of the finding"},
}

_STR = h5py.string_dtype(encoding="utf-8")


def iso_utc(value: datetime | str) -> str:
    """An ISO 8601 UTC timestamp ``YYYY-MM-DDTHH:MM:SS[.ffffff]Z``.

    Naive datetimes are taken as UTC (the ingest stage stores the start time in UTC);
    aware ones are converted. Strings are parsed with :meth:`datetime.fromisoformat`.
    """
    dt = datetime.fromisoformat(value) if isinstance(value, str) else value
    if not isinstance(dt, datetime):
        raise ValueError(f"expected a datetime or ISO 8601 text, got {value!r}")
    dt = dt.replace(tzinfo=UTC) if dt.tzinfo is None else dt.astimezone(UTC)
    spec = "microseconds" if dt.microsecond else "seconds"
    text = dt.replace(tzinfo=None).isoformat(timespec=spec)
    return text + "Z"


def _attr_value(key: str, value: Any) -> Any:
    """Convert a Python value into something h5py stores portably as an attribute."""
    if isinstance(value, Mapping):
        return json.dumps(value, sort_keys=True, default=str, ensure_ascii=False)
    if isinstance(value, datetime):
        return iso_utc(value)
    if isinstance(value, date | Path):
        return value.isoformat() if isinstance(value, date) else str(value)
    if isinstance(value, bool | np.bool_):
        return np.int8(value)  # HDF5 has no portable boolean; 0/1 reads everywhere
    if isinstance(value, str | int | float | np.integer | np.floating):
        return value
    if isinstance(value, list | tuple | np.ndarray):
        arr = np.asarray(value)
        if arr.dtype.kind in "iuf" and arr.ndim == 1:
            return arr
        if arr.ndim == 1 and all(isinstance(v, str) for v in value):
            return np.array(list(value), dtype=_STR)
        return json.dumps(np.asarray(value, dtype=object).tolist(), default=str)
    raise ValueError(
        f"attribute {key!r}: cannot store a value of type {type(value).__name__} "
        "(use text, numbers, lists or dicts)"
    )


def _no_nul(value: Any) -> Any:
    """HDF5 variable-length strings end at a NUL: text carrying one (a NUL-padded log line
    quoted in a note) gets ``?`` in its place."""
    if isinstance(value, str):
        return value.replace("\x00", "?")
    if isinstance(value, np.ndarray) and value.dtype == object:
        return np.array([_no_nul(v) for v in value], dtype=value.dtype)
    return value


def _set_attrs(obj: h5py.HLObject, attrs: Mapping[str, Any]) -> None:
    """Set attributes on a group or dataset; ``None`` values (unknown) are left out."""
    for key, value in attrs.items():
        if value is None:
            continue
        obj.attrs[key] = _no_nul(_attr_value(key, value))


def _finite_or_nan(values: Any, name: str) -> np.ndarray:
    """``values`` as float64 with every infinity replaced by NaN (never a sentinel or inf)."""
    try:
        arr = np.array(values, dtype=np.float64)  # a copy: the caller's data stay untouched
    except (TypeError, ValueError) as exc:
        raise ValueError(f"series {name!r} is not numeric: {exc}") from exc
    arr[np.isinf(arr)] = np.nan
    return arr


def _series_attrs(name: str, given: Mapping[str, Any] | None) -> dict[str, Any]:
    """Attributes of one series: the given ones, with units/long_name from the glossary."""
    attrs = dict(given or {})
    q = describe(name)
    if q is not None:
        attrs.setdefault("units", q.unit)
        attrs.setdefault("long_name", q.long_name)
    missing = [k for k in ("units", "long_name") if not attrs.get(k)]
    if missing:
        raise ValueError(
            f"series {name!r} has no {' and no '.join(missing)}: give them in "
            "ProcessResult.series_attrs or add the quantity to pipeline.quantities"
        )
    return attrs


def _write_timeseries(f: h5py.File, result: ProcessResult, threads: int | None) -> None:
    series = result.series
    if "time" not in series.columns:
        raise ValueError("ProcessResult.series has no 'time' column")
    if series.columns.duplicated().any():
        dup = sorted(set(series.columns[series.columns.duplicated()]))
        raise ValueError(f"ProcessResult.series has duplicate columns: {', '.join(dup)}")
    n = len(series)
    g = f.create_group("timeseries", track_order=True)
    storage: dict[str, Any] = {"fillvalue": np.nan, "track_times": False}
    if n > 0:
        storage |= {
            "chunks": (min(CHUNK_SAMPLES, n),),
            "compression": "gzip",
            "compression_opts": recorded_gzip_level(),
            "shuffle": True,
        }
    names = ["time"] + [c for c in series.columns if c != "time"]
    all_attrs = {name: _series_attrs(name, result.series_attrs.get(name)) for name in names}

    time_attrs = all_attrs["time"]
    start = result.attrs.get("start_time_utc")
    time_attrs["units"] = f"seconds since {iso_utc(start)}" if start else "s"
    if start:
        time_attrs.setdefault("calendar", "standard")
    time_attrs.setdefault("axis", "T")
    time_attrs.setdefault("standard_name", "time")

    datasets = {}
    arrays = {}
    for name in names:
        ds = g.create_dataset(name, shape=(n,), dtype=np.float64, **storage)
        _set_attrs(ds, all_attrs[name])
        datasets[name] = ds
        arrays[name] = _series_array(series[name], name)
    if n > 0:
        _write_chunks(datasets, arrays, storage["chunks"][0], threads)
    tm = datasets["time"]
    tm.make_scale("time")
    for name in names[1:]:
        datasets[name].dims[0].attach_scale(tm)


def stored_series(result: ProcessResult) -> dict[str, np.ndarray]:
    """The values :func:`write_result` stores in ``/timeseries/``, per series: float64 with
    every infinity as NaN. Views of ``result.series`` where nothing needs changing."""
    out = {}
    for name in result.series.columns:
        arr = _series_array(result.series[name], str(name))
        if np.isinf(arr).any():
            arr = np.where(np.isinf(arr), np.nan, arr)
        out[str(name)] = arr
    return out


def _series_array(values: pd.Series, name: str) -> np.ndarray:
    """A series as a float64 array: a view when it already is one (infinities are replaced
    chunk by chunk while encoding), else a converted copy without infinities."""
    arr = values.to_numpy()
    if arr.dtype == np.float64:
        return arr
    return _finite_or_nan(arr, name)


def recorded_gzip_level() -> int:
    """The gzip level written into the filter pipeline for the encoder in use."""
    try:
        import isal  # noqa: F401
    except ImportError:
        return GZIP_LEVEL
    return ISAL_RECORDED_LEVEL


def _deflate_encoder() -> Callable[[Any], bytes]:
    """The zlib-stream deflate encoder: ISA-L when installed, else the standard library."""
    try:
        from isal import isal_zlib
    except ImportError:
        return lambda buf: zlib.compress(buf, GZIP_LEVEL)
    return lambda buf: isal_zlib.compress(buf, ISAL_LEVEL)


def _cpu_count() -> int:
    """CPUs this process may run on (the affinity mask where the OS has one)."""
    if hasattr(os, "sched_getaffinity"):
        return len(os.sched_getaffinity(0))
    return os.cpu_count() or 1


def _encode_chunk(values: np.ndarray, chunk: int, deflate: Callable[[Any], bytes]) -> bytes:
    """One stored chunk: float64 values (infinities -> NaN, padded with the NaN fill value to a
    whole chunk), byte-shuffled like the HDF5 shuffle filter, then deflated (zlib stream)."""
    block = np.full(chunk, np.nan)
    block[: values.size] = values
    block[np.isinf(block)] = np.nan
    # HDF5 shuffle: byte 0 of every element, then byte 1, ... (little-endian float64 on disk)
    shuffled = np.ascontiguousarray(block.astype("<f8", copy=False).view(np.uint8).reshape(-1, 8).T)
    return deflate(shuffled)


def _write_chunks(
    datasets: Mapping[str, h5py.Dataset],
    arrays: Mapping[str, np.ndarray],
    chunk: int,
    threads: int | None = None,
) -> None:
    """Encode every chunk in a thread pool and store it with ``write_direct_chunk``.

    The HDF5 library is not used from the worker threads: they only shuffle and deflate; this
    thread writes the chunks in order. At most a few chunks per thread are in flight, so the
    memory held is a few MB whatever the length of the night.
    """
    deflate = _deflate_encoder()
    threads = threads or min(MAX_WRITE_THREADS, _cpu_count())
    jobs: Iterator[tuple[h5py.Dataset, int, np.ndarray]] = (
        (datasets[name], i, arr[i : i + chunk])
        for name, arr in arrays.items()
        for i in range(0, arr.size, chunk)
    )
    pending: deque[tuple[h5py.Dataset, int, Future[bytes]]] = deque()

    def store_oldest() -> None:
        ds, offset, fut = pending.popleft()
        ds.id.write_direct_chunk((offset,), fut.result(), filter_mask=0)

    with ThreadPoolExecutor(max_workers=threads) as pool:
        try:
            for ds, offset, values in jobs:
                pending.append((ds, offset, pool.submit(_encode_chunk, values, chunk, deflate)))
                if len(pending) >= 3 * threads:
                    store_oldest()
            while pending:
                store_oldest()
        except BaseException:
            for _, _, fut in pending:
                fut.cancel()
            raise


def _is_missing(v: Any) -> bool:
    """True for None, pd.NA, NaT and float NaN (written as empty text in string columns)."""
    return v is None or v is pd.NA or v is pd.NaT or (isinstance(v, float) and np.isnan(v))


def _column_data(table: str, col: str, values: pd.Series) -> tuple[np.ndarray, Any]:
    """One table column as (array, h5py dtype): float64, int64 or variable-length UTF-8."""
    kind = values.dtype.kind
    if kind == "b":
        return values.to_numpy(dtype=np.int64), np.int64
    if kind in "iu":
        return values.to_numpy(dtype=np.int64), np.int64
    if kind == "f":
        return _finite_or_nan(values.to_numpy(), f"{table}/{col}"), np.float64
    if kind == "M":
        text = [iso_utc(v.to_pydatetime()) if not pd.isna(v) else "" for v in values]
        return np.array(text, dtype=object), _STR
    if pd.api.types.is_numeric_dtype(values.dtype):  # nullable integer / float extension types
        return _finite_or_nan(values.to_numpy(dtype=np.float64, na_value=np.nan), col), np.float64
    text = ["" if _is_missing(v) else str(v).replace("\x00", "?") for v in values]
    return np.array(text, dtype=object), _STR


#: Name of each table's row dimension (a dimension scale, so netCDF readers and xarray open
#: the group with a named dimension); other tables use ``<table>_row``.
ROW_DIMENSIONS = {
    "flags": "flag", "steady_points": "point", "drift": "drift_row", "verdicts": "verdict_row",
    "emissions": "emissions_row", "drift_correction": "reading",
}


def _write_table(
    f: h5py.File,
    name: str,
    df: pd.DataFrame,
    column_attrs: Mapping[str, Mapping[str, Any]] | None = None,
    time_units: str = "s",
) -> None:
    """A table as a group of equal-length 1-D column datasets (column order kept), each with
    ``units`` (numbers) and ``long_name`` from the table, the glossary or the table-column
    glossary (:func:`pipeline.quantities.table_column`), and the row dimension scale of
    :data:`ROW_DIMENSIONS`. Interval times (``start_s``, ``end_s``, ``onset_s``) carry
    ``time_units`` (CF ``seconds since <start>`` when the run's start is known)."""
    if df.columns.duplicated().any():
        raise ValueError(f"table {name!r} has duplicate column names")
    g = f.require_group(name) if name in f else f.create_group(name, track_order=True)
    units = dict(df.attrs.get("units", {}) or {})
    long_names = dict(df.attrs.get("long_names", {}) or {})
    dim = ROW_DIMENSIONS.get(name, f"{name}_row")
    if dim in df.columns:
        dim = f"{dim}_index"
    row = g.create_dataset(dim, data=np.arange(len(df), dtype=np.int64), track_times=False)
    row.make_scale(dim)
    _set_attrs(row, {"long_name": f"row of the {name} table", "units": "1"})
    for col in df.columns:
        data, dtype = _column_data(name, str(col), df[col])
        kwargs: dict[str, Any] = {"track_times": False}
        if dtype is np.float64:
            kwargs["fillvalue"] = np.nan
        ds = g.create_dataset(str(col), data=data, dtype=dtype, **kwargs)
        attrs = dict((column_attrs or {}).get(str(col), {}))
        q = describe(str(col))
        if str(col) in units:
            attrs["units"] = units[str(col)]
        elif q is not None and dtype is not _STR:
            attrs.setdefault("units", q.unit)
        if str(col) in long_names:
            attrs["long_name"] = long_names[str(col)]
        elif q is not None:
            attrs.setdefault("long_name", q.long_name)
        known = table_column(str(col))
        if known is not None:
            unit, long_name = known
            if unit is not None and dtype is not _STR:
                attrs.setdefault("units", unit)
            attrs.setdefault("long_name", long_name)
        attrs.setdefault("long_name", str(col).replace("_", " "))
        if str(col) in ("start_s", "end_s", "onset_s") and dtype is np.float64:
            attrs["units"] = time_units
        _set_attrs(ds, attrs)
        ds.dims[0].attach_scale(row)


def _write_flags(f: h5py.File, flags: pd.DataFrame | None, time_units: str = "s") -> None:
    if flags is None:
        flags = pd.DataFrame(columns=list(FLAG_COLUMNS))
    missing = [c for c in FLAG_COLUMNS if c not in flags.columns]
    if missing and len(flags):
        raise ValueError(f"flags table lacks the column(s) {', '.join(missing)} (see FLAG_COLUMNS)")
    out = flags.copy()
    for col in FLAG_COLUMNS:
        if col not in out.columns:
            numeric = col in ("start_s", "end_s", "value")
            out[col] = pd.Series(dtype="float64" if numeric else object)
    for col in ("start_s", "end_s", "value"):
        out[col] = pd.to_numeric(out[col], errors="raise").astype("float64")
    for col in ("check", "suspect", "severity", "message"):
        out[col] = out[col].astype(object)
    out = out[list(FLAG_COLUMNS) + [c for c in out.columns if c not in FLAG_COLUMNS]]
    _write_table(f, "flags", out, FLAG_COLUMN_ATTRS, time_units)


def _fill(f: h5py.File, result: ProcessResult, threads: int | None) -> None:
    root_attrs = dict(result.attrs)
    root_attrs["Conventions"] = CONVENTIONS
    if root_attrs.get("start_time_utc"):
        root_attrs["start_time_utc"] = iso_utc(root_attrs["start_time_utc"])
    if not root_attrs.get("created_utc"):
        root_attrs["created_utc"] = iso_utc(datetime.now(UTC).replace(microsecond=0))
    if not root_attrs.get("tool_version"):
        from .. import __version__

        root_attrs["tool_version"] = __version__
    _set_attrs(f, root_attrs)
    _write_timeseries(f, result, threads)
    start = result.attrs.get("start_time_utc")
    time_units = f"seconds since {iso_utc(start)}" if start else "s"
    _write_flags(f, result.flags, time_units)
    for name, table in result.tables.items():
        if name in ("timeseries", "flags"):
            raise ValueError(f"table name {name!r} is reserved by the result file layout")
        _write_table(f, name, table, time_units=time_units)
    for name, attrs in result.group_attrs.items():
        g = f.require_group(name) if name in f else f.create_group(name, track_order=True)
        _set_attrs(g, attrs)


def write_result(path: Path, result: ProcessResult, *, threads: int | None = None) -> Path:
    """Write ``result`` to the HDF5 file ``path`` atomically and return the path.

    ``threads``: threads that compress the time-series chunks (None: one per CPU this process
    may use, at most :data:`MAX_WRITE_THREADS`).

    The file is built under a temporary name (``.<name>.*.tmp``) in the same directory,
    closed and renamed with :func:`os.replace`, so an existing result at ``path`` is only
    replaced by a complete new one. On any exception, including ``KeyboardInterrupt``, the
    temporary file is removed and the exception re-raised.

    Raises ValueError when a series has no ``units`` or ``long_name`` (neither given in
    ``result.series_attrs`` nor in the glossary), when ``time`` is missing, or when a value
    cannot be stored.
    """
    path = Path(path)
    with atomic_path(path) as tmp:
        # The temporary file is ours alone: no HDF5 file locking (fails on some NFS mounts).
        with h5py.File(tmp, "w", libver=LIBVER, track_order=True, locking=False) as f:
            _fill(f, result, threads)
    return path
