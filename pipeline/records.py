"""The data objects passed between stages.

ingest -> :class:`RunData` -> balance -> checks -> :class:`ProcessResult` -> report.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

#: Columns of the flags table (DESIGN.md result-file contract), in order.
FLAG_COLUMNS = ("start_s", "end_s", "check", "suspect", "severity", "value", "message")


def columns_frame(columns: Mapping[str, Any]) -> pd.DataFrame:
    """A DataFrame of equal-length 1-D columns without copying them.

    ``pd.DataFrame(dict)`` stacks the columns of one dtype into a 2-D block, i.e. copies every
    column of a long night (hundreds of MB for the time series of a 12 h / 10 Hz night). Here
    each 1-D NumPy column becomes a block of its own, a view of the given array, through
    :func:`pandas.api.internals.create_dataframe_from_blocks` (pandas >= 3.0). The arrays must
    not be modified in place afterwards (copy-on-write does not see such changes). Columns that
    are not plain 1-D NumPy arrays, or an older pandas, take the ordinary constructor.
    """
    arrays = [np.asarray(v) if isinstance(v, np.ndarray | list) else v for v in columns.values()]
    if int(pd.__version__.split(".")[0]) < 3:  # no block API, and no copy-on-write by default
        return pd.DataFrame(dict(columns))
    from pandas.api.internals import create_dataframe_from_blocks
    lengths = {len(a) for a in arrays if hasattr(a, "__len__")}
    plain = all(
        isinstance(a, np.ndarray) and a.ndim == 1 and a.dtype.kind in "biuf" for a in arrays
    )
    if not arrays or not plain or len(lengths) != 1:
        return pd.DataFrame(dict(columns))
    n = lengths.pop()
    blocks = [(a.reshape(1, n), np.array([i], dtype=np.intp)) for i, a in enumerate(arrays)]
    return create_dataframe_from_blocks(
        blocks, index=pd.RangeIndex(n), columns=pd.Index(list(columns))
    )


def with_columns(frame: pd.DataFrame, updates: Mapping[str, Any]) -> pd.DataFrame:
    """A new frame: the columns of ``frame`` (not copied), those in ``updates`` replaced, new
    ones appended, built with :func:`columns_frame`. ``frame`` itself is not changed."""
    columns: dict[str, Any] = {str(c): frame[c].to_numpy() for c in frame.columns}
    columns.update(updates)
    return columns_frame(columns)


def empty_flags() -> pd.DataFrame:
    """An empty flags table with the contract's columns (and ``value_unit``) and dtypes."""
    return pd.DataFrame(
        {
            "start_s": pd.Series(dtype="float64"),
            "end_s": pd.Series(dtype="float64"),
            "check": pd.Series(dtype="object"),
            "suspect": pd.Series(dtype="object"),
            "severity": pd.Series(dtype="object"),
            "value": pd.Series(dtype="float64"),
            "message": pd.Series(dtype="object"),
            "value_unit": pd.Series(dtype="object"),
        }
    )


@dataclass(frozen=True)
class Flag:
    """One row of the flags table (DESIGN.md result-file contract).

    start_s, end_s: the interval [s since start]; check: the check that raised it; suspect:
    the instrument(s) blamed, ``|``-separated ("" for none, "time" for the logger clock);
    severity: ``info`` | ``warning`` | ``error``; value: the check's number (its meaning is
    in the check's documentation); message: one plain sentence; unit: of ``value``.
    """

    start_s: float
    end_s: float
    check: str
    suspect: str = ""
    severity: str = "warning"
    value: float = float("nan")
    message: str = ""
    unit: str = ""  # of ``value``; "" takes the check's (instruments.FLAG_VALUE_UNITS)


def make_flags(rows: Sequence[Flag | Mapping[str, Any]]) -> pd.DataFrame:
    """A flags table from :class:`Flag` records (or row dicts: missing suspect -> "",
    value -> NaN)."""
    if not rows:
        return empty_flags()
    from .instruments import FLAG_VALUE_UNITS

    df = pd.DataFrame([asdict(r) if isinstance(r, Flag) else dict(r) for r in rows])
    for col in FLAG_COLUMNS:
        if col not in df:
            df[col] = float("nan") if col == "value" else ""
    unit = df["unit"].fillna("").astype(str) if "unit" in df else pd.Series("", index=df.index)
    default = df["check"].astype(str).map(FLAG_VALUE_UNITS).fillna("1")
    df["value_unit"] = unit.where(unit != "", default).astype(object)
    df = df[[*FLAG_COLUMNS, "value_unit"]]
    df["start_s"] = df["start_s"].astype("float64")
    df["end_s"] = df["end_s"].astype("float64")
    df["value"] = df["value"].astype("float64")
    for col in ("check", "suspect", "severity", "message"):
        df[col] = df[col].fillna("").astype(str).astype(object)
    return df


@dataclass
class RunMeta:
    """What ingest learned about the source file.

    source: the input file; sha256: its SHA-256 hex digest; start_time: absolute start of the
    run (UTC) when the log gives one; rows_read: data rows in the file; rows_dropped: rows
    removed (each counted with its reason in ``warnings``); units_in: unit string used per
    quantity; columns_in: logger column per quantity; bad_cells: non-numeric cells turned into
    NaN, per quantity; missing_cells: empty cells (or missing markers) per quantity, not
    counting those a slow channel holds its value over; warnings: plain-sentence notes for
    the console and the result file; update_rows: for channels logged at a lower rate than
    the file, the rows between their updates.
    """

    source: Path
    sha256: str
    start_time: datetime | None = None
    rows_read: int = 0
    rows_dropped: int = 0
    units_in: dict[str, str] = field(default_factory=dict)
    columns_in: dict[str, str] = field(default_factory=dict)
    bad_cells: dict[str, int] = field(default_factory=dict)
    missing_cells: dict[str, int] = field(default_factory=dict)
    metadata: dict[str, str] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    update_rows: dict[str, int] = field(default_factory=dict)


@dataclass
class RunData:
    """One logged run in canonical units on one time base.

    ``frame`` has a float64 ``time`` column (s from run start, increasing) and one float64
    column per mapped canonical quantity, in canonical units (quantities.INPUTS). Gas channels
    are as measured (their dry/wet basis is in the config); THC is on a C1 basis.
    """

    frame: pd.DataFrame
    meta: RunMeta


@dataclass
class ProcessResult:
    """Everything the report stage writes.

    series: ``time`` plus every series for ``/timeseries/`` (canonical units);
    series_attrs: per series, attributes (``units``, ``long_name``, plus e.g. ``basis``);
    flags: the flags table (FLAG_COLUMNS); tables: other tables, e.g. ``steady_points``;
    group_attrs: attributes of other groups, e.g. ``{"alignment": {"analyzer_delay_s": 8.0}}``;
    attrs: root attributes (provenance); summary: lines for the console.
    """

    series: pd.DataFrame
    series_attrs: dict[str, dict[str, Any]]
    flags: pd.DataFrame
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    group_attrs: dict[str, dict[str, Any]] = field(default_factory=dict)
    attrs: dict[str, Any] = field(default_factory=dict)
    summary: list[str] = field(default_factory=list)

    @property
    def timeseries(self) -> pd.DataFrame:
        """The time series under the name a read result file uses (the same frame as
        :attr:`series`; :func:`pipeline.result.result_in_memory` gives the full file
        layout)."""
        return self.series

    @property
    def units(self) -> dict[str, str]:
        """``units`` per series, as :attr:`pipeline.result.ResultFile.units`."""
        return {n: str(a.get("units", "")) for n, a in self.series_attrs.items()}

    @property
    def long_names(self) -> dict[str, str]:
        """``long_name`` per series, as :attr:`pipeline.result.ResultFile.long_names`."""
        return {n: str(a.get("long_name", "")) for n, a in self.series_attrs.items()}
