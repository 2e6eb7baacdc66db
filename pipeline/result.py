"""Read a dynoqc HDF5 result file back into pandas (DESIGN.md "Result file (contract)").

``pandas.read_hdf`` only opens files in pandas' own PyTables layout, so this small reader
returns the series and tables of a result file as DataFrames with their units. Everything a
report shows can be re-plotted from the :class:`ResultFile` alone.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import h5py
import numpy as np
import pandas as pd

from .errors import InputDataError
from .records import FLAG_COLUMNS, ProcessResult, columns_frame, empty_flags

#: Attributes HDF5 manages itself for dimension scales (not part of our metadata).
_SCALE_ATTRS = frozenset({"CLASS", "NAME", "DIMENSION_LIST", "REFERENCE_LIST", "_Netcdf4Dimid"})

_SINCE = "seconds since "


@dataclass
class ResultFile:
    """The content of a result file.

    timeseries: one float64 column per ``/timeseries/`` dataset, ``time`` first [s since
    start]; units / long_names: per series; series_attrs: all attributes per series (decoded);
    flags: the ``/flags/`` table (FLAG_COLUMNS, strings as ``str``); tables: every other
    table group (e.g. ``steady_points``), column units in ``df.attrs["units"]``;
    group_attrs: attributes of every group other than ``/timeseries`` and ``/flags`` that has
    any (e.g. ``alignment``); attrs: root attributes (JSON objects decoded to dicts);
    start_time: absolute start of the run (UTC) when the time units carry it.
    """

    timeseries: pd.DataFrame
    units: dict[str, str]
    long_names: dict[str, str]
    series_attrs: dict[str, dict[str, Any]]
    flags: pd.DataFrame
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    group_attrs: dict[str, dict[str, Any]] = field(default_factory=dict)
    attrs: dict[str, Any] = field(default_factory=dict)
    start_time: datetime | None = None
    path: Path | None = None

    @property
    def table_units(self) -> dict[str, dict[str, str]]:
        """``units`` of every table column, per table (``/flags/`` included)."""
        out = {name: dict(t.attrs.get("units", {})) for name, t in self.tables.items()}
        out["flags"] = dict(self.flags.attrs.get("units", {}))
        return out

    @property
    def time_h(self) -> np.ndarray:
        """Time since start of run in hours."""
        return self.timeseries["time"].to_numpy(dtype=np.float64) / 3600.0


def _decode(value: Any) -> Any:
    """An attribute value as plain Python: str, int, float, list, or dict for JSON objects."""
    if isinstance(value, bytes | np.bytes_):
        value = value.decode("utf-8")
    if isinstance(value, str):
        text = value.strip()
        if text.startswith("{") and text.endswith("}"):
            try:
                return json.loads(text)
            except json.JSONDecodeError:
                return value
        return value
    if isinstance(value, np.ndarray):
        if value.ndim == 0:
            return _decode(value[()])
        return [_decode(v) for v in value.tolist()]
    if isinstance(value, np.generic):
        return value.item()
    return value


def _attrs(obj: h5py.HLObject) -> dict[str, Any]:
    return {k: _decode(v) for k, v in obj.attrs.items() if k not in _SCALE_ATTRS}


def parse_time_units(units: str) -> datetime | None:
    """The reference time of CF units ``seconds since <ISO 8601>`` as an aware UTC datetime.

    Returns None for plain ``s``. A reference without an offset is taken as UTC (CF default).
    """
    if not units.startswith(_SINCE):
        return None
    ref = units[len(_SINCE) :].strip()
    dt = datetime.fromisoformat(ref.replace(" ", "T", 1) if "T" not in ref else ref)
    return dt.replace(tzinfo=UTC) if dt.tzinfo is None else dt.astimezone(UTC)


def _column(ds: h5py.Dataset) -> np.ndarray:
    if h5py.check_string_dtype(ds.dtype) is not None:
        return np.array(ds.asstr()[()], dtype=object)
    return ds[()]


def _is_scale(ds: h5py.Dataset) -> bool:
    """A dimension scale (a table's row dimension), not a column."""
    value = ds.attrs.get("CLASS")
    return value in (b"DIMENSION_SCALE", "DIMENSION_SCALE")


def _table(g: h5py.Group) -> pd.DataFrame:
    cols = {name: _column(ds) for name, ds in g.items()
            if isinstance(ds, h5py.Dataset) and not _is_scale(ds)}
    lengths = {len(v) for v in cols.values()}
    if len(lengths) > 1:
        raise ValueError(f"{g.file.filename}: table {g.name} has columns of unequal length")
    df = pd.DataFrame(cols)
    for name, values in cols.items():  # keep object dtype for strings (also when empty)
        if values.dtype == object:
            df[name] = pd.Series(values, dtype=object)
    df.attrs["units"] = {n: str(g[n].attrs["units"]) for n in cols if "units" in g[n].attrs}
    df.attrs["long_names"] = {
        n: str(g[n].attrs["long_name"]) for n in cols if "long_name" in g[n].attrs
    }
    return df


def read_result(
    path: str | Path, *, series: Mapping[str, np.ndarray] | None = None
) -> ResultFile:
    """Read a dynoqc result file written by :func:`pipeline.report.hdf5.write_result`.

    ``series``: the values of ``/timeseries/`` already in memory, exactly as written (see
    :func:`pipeline.report.hdf5.stored_series`); then only the attributes and tables are read
    from the file, which saves decoding a night's worth of series right after writing them.
    They must hold every series of the file, at its length.
    """
    path = Path(path)
    if not path.is_file():
        raise InputDataError(f"{path}: no such result file.")
    try:
        f = h5py.File(path, "r", locking="best-effort")
    except OSError as exc:
        raise InputDataError(
            f"{path}: not a readable HDF5 file ({str(exc).splitlines()[0]})."
        ) from None
    try:
        with f:
            return _read_open(path, f, series)
    except OSError as exc:  # a damaged file: unreadable chunks or metadata
        raise InputDataError(
            f"{path}: the result file is damaged ({str(exc).splitlines()[0]})."
        ) from None


def _read_open(path: Path, f: h5py.File, series: Mapping[str, np.ndarray] | None) -> ResultFile:
    """:func:`read_result` on an open file."""
    if "timeseries" not in f or "time" not in f["timeseries"]:
        raise InputDataError(f"{path}: not a dynoqc result file (no /timeseries/time).")
    ts = f["timeseries"]
    names = ["time"] + [n for n in ts if n != "time" and isinstance(ts[n], h5py.Dataset)]
    if series is None:
        arrays = {n: ts[n][()] for n in names}
    else:
        n_rows = ts["time"].shape[0]
        wrong = [n for n in names if n not in series or len(series[n]) != n_rows]
        if wrong:
            raise ValueError(f"{path}: series given in memory do not match {wrong[:3]}")
        arrays = series
    timeseries = columns_frame(
        {n: np.asarray(arrays[n], dtype=np.float64) for n in names}
    )
    series_attrs = {n: _attrs(ts[n]) for n in names}
    units = {n: str(a.get("units", "")) for n, a in series_attrs.items()}
    long_names = {n: str(a.get("long_name", "")) for n, a in series_attrs.items()}

    if "flags" in f:
        flags = _table(f["flags"])
        for col in FLAG_COLUMNS:
            if col not in flags:
                raise ValueError(f"{path}: /flags lacks the column {col!r}")
    else:
        flags = empty_flags()

    tables: dict[str, pd.DataFrame] = {}
    group_attrs: dict[str, dict[str, Any]] = {}

    def visit(name: str, obj: h5py.HLObject) -> None:
        if not isinstance(obj, h5py.Group) or name in ("timeseries", "flags"):
            return
        if any(isinstance(v, h5py.Dataset) for v in obj.values()):
            tables[name] = _table(obj)
        attrs = _attrs(obj)
        if attrs:
            group_attrs[name] = attrs

    f.visititems(visit)
    attrs = _attrs(f)

    start_time = parse_time_units(units["time"])
    return ResultFile(
        timeseries=timeseries,
        units=units,
        long_names=long_names,
        series_attrs=series_attrs,
        flags=flags,
        tables=tables,
        group_attrs=group_attrs,
        attrs=attrs,
        start_time=start_time,
        path=path,
    )


def result_in_memory(result: ProcessResult) -> ResultFile:
    """A :class:`ResultFile` of a result not written yet: the same layout and values
    :func:`read_result` gives after :func:`pipeline.report.hdf5.write_result` (every series
    as float64, infinities as NaN), so a notebook can plot or summarise a
    :func:`pipeline.process_run` result without a file."""
    columns = {}
    for name in result.series.columns:
        v = np.asarray(result.series[name].to_numpy(), dtype=np.float64)
        columns[str(name)] = np.where(np.isinf(v), np.nan, v) if np.isinf(v).any() else v
    timeseries = columns_frame(columns)
    series_attrs = {n: dict(result.series_attrs.get(n, {})) for n in columns}
    start = result.attrs.get("start_time_utc")
    start_time = parse_time_units(f"{_SINCE}{start}") if start else None
    if "time" in series_attrs:
        series_attrs["time"].setdefault("units", f"{_SINCE}{start}" if start else "s")
    return ResultFile(
        timeseries=timeseries,
        units={n: str(a.get("units", "")) for n, a in series_attrs.items()},
        long_names={n: str(a.get("long_name", "")) for n, a in series_attrs.items()},
        series_attrs=series_attrs,
        flags=result.flags.copy() if len(result.flags) else empty_flags(),
        tables={k: v.copy() for k, v in result.tables.items()},
        group_attrs={k: dict(v) for k, v in result.group_attrs.items()},
        attrs=dict(result.attrs),
        start_time=start_time,
        path=None,
    )


def as_result(res: ResultFile | ProcessResult) -> ResultFile:
    """``res`` itself when read from a file, else :func:`result_in_memory` of it."""
    return res if isinstance(res, ResultFile) else result_in_memory(res)


def provenance(res: ResultFile) -> tuple[str, str]:
    """(run name, one-line provenance) for title blocks and summaries, from the root
    attributes: run date, fuel, config name, source file with short SHA-256, tool version."""
    a = res.attrs
    source = str(a.get("source_file", "") or "")
    run = str(
        a.get("run_name")
        or (Path(source).name.split(".")[0] if source else "")
        or (res.path.stem if res.path else "unnamed run")
    )
    if res.start_time is not None:
        when = f"run start {res.start_time:%Y-%m-%d %H:%M} UTC"
    elif a.get("created_utc"):
        when = f"processed {str(a['created_utc'])[:10]} (run start unknown)"
    else:
        when = "run date unknown"
    fuel = a.get("fuel_name") or a.get("fuel_preset")
    if not fuel and isinstance(a.get("fuel"), dict):
        fuel = a["fuel"].get("name")
    config = a.get("config_name") or a.get("config_file")
    parts = [when, f"fuel {fuel or 'unknown'}"]
    parts.append(f"config {Path(str(config)).name if config else 'unknown'}")
    if source:
        sha = str(a.get("source_sha256", "") or "")
        parts.append(f"source {Path(source).name}" + (f" [{sha[:10]}]" if sha else ""))
    parts.append(f"dynoqc {a.get('tool_version', '?')}")
    return run, "  \u00b7  ".join(parts)
