"""Format-independent half of ingest: map columns, check units, count cells, build the time base.

Each reader (:mod:`.csv`, :mod:`.parquet`, :mod:`.mdf`) describes its file as a
:class:`Source` (column names, the units the file gives, metadata, a start time and a loader
for the raw columns); :func:`build_run` turns that into a :class:`~pipeline.records.RunData` in
canonical units, with every dropped row and every unusable cell counted in the metadata.
"""

from __future__ import annotations

import difflib
import hashlib
import re
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd

from ..config import UNIT_FROM_FILE, Channel, Config
from ..constants import P_STD_KPA
from ..errors import ConfigError, InputDataError
from ..quantities import INPUTS
from ..records import RunData, RunMeta, columns_frame
from ..units import Conversion, conversion, is_known_unit
from .sniff import ISO_OFFSET_RE, ISO_RE

#: Channels that must hold numbers; the others may be entirely empty (with a warning).
MUST_HAVE_NUMBERS = ("time", "fuel_mass_flow", "air_mass_flow")

#: Metadata keys (normalised: lower case, ``_`` for blanks) that give the start of the run,
#: in order of preference.
START_KEYS = (
    "start_time", "starttime", "start_datetime", "start_date_time", "test_start", "start",
    "datetime", "date_time", "timestamp", "date",
)

#: Physical limits per canonical quantity (canonical units). A reading outside is not a
#: measurement (a logger sentinel such as -9999 or 1e30, an overflow, a wrong unit) and is
#: replaced by NaN and counted as a bad cell. The limits are deliberately far outside any
#: engine test cell (our choice, common practice of plausibility screens): they catch junk,
#: not unusual readings, which the checks stage flags as ``out_of_range``.
PHYSICAL_LIMITS: dict[str, tuple[float, float]] = {
    "speed": (-1e3, 1e5),  # rpm
    "torque": (-1e6, 1e6),  # N.m
    "fuel_mass_flow": (-1e3, 1e6),  # kg/h
    "air_mass_flow": (-1e4, 1e7),  # kg/h
    "co2": (-1.0, 1.0),  # mol/mol
    "co": (-1.0, 1.0),
    "o2": (-1.0, 1.0),
    "nox": (-1.0, 1.0),
    "no": (-1.0, 1.0),
    "no2": (-1.0, 1.0),
    "thc": (-1.0, 1.0 * 12),  # C1 basis: up to 12 carbon atoms per molecule
    "h2": (-1.0, 1.0),
    "lambda_sensor": (-1.0, 1e3),
    "ambient_temperature": (-273.15, 1e3),  # degC
    "ambient_pressure": (0.0, 1e4),  # kPa, absolute
    "ambient_humidity": (-50.0, 200.0),  # % RH
    "intake_humidity": (-50.0, 1e3),  # g/kg
    "exhaust_pressure": (0.0, 1e4),  # kPa, absolute
    "sample_line_temperature": (-273.15, 2e3),  # degC
    "analyzer_mode": (-1e9, 1e9),
}

#: Quantities for which a negative reading is meaningless (counted and reported, kept).
NOT_NEGATIVE = (
    "fuel_mass_flow", "air_mass_flow", "co2", "co", "o2", "nox", "no", "no2", "thc", "h2",
    "lambda_sensor",
)

#: A reading below -NEGATIVE_TOLERANCE x the channel's full scale counts as negative.
NEGATIVE_TOLERANCE = 0.05

_EMBEDDED_UNIT_RES = (
    re.compile(r"^(?P<name>.*?)\s*\[(?P<unit>[^\[\]]*)\]$"),
    re.compile(r"^(?P<name>.*?)\s*\((?P<unit>[^()]*)\)$"),
    re.compile(r"^(?P<name>[^/]*?)\s*/\s*(?P<unit>.+)$"),
)

#: Loader of raw columns: (positions, positions to keep as text) -> {position: Series}.
Loader = Callable[[list[int], set[int]], dict[int, pd.Series]]


@dataclass
class Source:
    """A logged file as a reader sees it, before mapping.

    names: column names (positions index this list); file_units: the unit each column carries
    in the file (units row, schema or channel metadata), None when not given; header: where the
    names are, for messages (e.g. ``"the names row (line 7)"``); metadata: key/value pairs of
    the file header; start_time: absolute start (UTC) known from the container itself;
    time_cells: sample text of a column (for detecting ISO 8601 time stamps); read_hint: how
    the file was parsed, appended to "holds no numbers" messages; load: the raw columns;
    fallback_time: position of the container's own time base, used when the configured time
    column is not a column of the file (MDF master time); notes: warnings of the reader.
    """

    path: Path
    kind: str
    names: list[str]
    file_units: list[str | None]
    header: str
    load: Loader
    metadata: dict[str, str] = field(default_factory=dict)
    start_time: datetime | None = None
    start_source: str = ""
    time_cells: Callable[[int], list[str]] | None = None
    read_hint: str = ""
    decimal: str = "."
    fallback_time: int | None = None
    notes: list[str] = field(default_factory=list)
    rows_note: str = ""


def file_sha256(path: Path) -> str:
    """SHA-256 hex digest of the raw file bytes (streamed)."""
    with open(path, "rb") as fh:
        return hashlib.file_digest(fh, "sha256").hexdigest()


def split_name_unit(name: str) -> tuple[str, str | None]:
    """Split a column name with an embedded unit: ``Speed [rpm]``, ``Speed (rpm)``,
    ``Speed/rpm`` -> (``Speed``, ``rpm``). The slash form counts only when the part after
    the slash is a known unit spelling. Returns (name, None) when there is no unit.
    """
    for k, rx in enumerate(_EMBEDDED_UNIT_RES):
        m = rx.match(name)
        if m and m.group("name"):
            unit = m.group("unit").strip()
            if k < 2 or is_known_unit(unit):
                return m.group("name").strip(), unit
    return name, None


def find_column(column: str, names: list[str]) -> int | None:
    """Index of ``column`` in ``names``: exact name, then bare name (unit stripped), then
    blanks stripped; None when absent."""
    hits = [i for i, n in enumerate(names) if n == column]
    if not hits:
        hits = [i for i, n in enumerate(names) if split_name_unit(n)[0] == column]
    if not hits:
        hits = [i for i, n in enumerate(names) if n.strip() == column.strip()]
    return hits[0] if hits else None


def close_matches(column: str, names: list[str], n: int = 3) -> list[str]:
    """Column names close to ``column`` (case-insensitive), for "did you mean" hints."""
    pool = list(dict.fromkeys([x for x in names if x] + [split_name_unit(x)[0] for x in names]))
    folded: dict[str, str] = {}
    for x in pool:
        folded.setdefault(x.casefold(), x)
    return [folded[c] for c in difflib.get_close_matches(column.casefold(), folded, n=n,
                                                         cutoff=0.5)]


def _locate(ch: Channel, src: Source) -> int:
    """Position of the channel's column; InputDataError naming file, column, key and matches."""
    col = ch.column
    assert col is not None
    idx = find_column(col, src.names)
    if idx is not None:
        return idx
    close = close_matches(col, src.names)
    if close:
        hint = "Close matches: " + ", ".join(f"'{c}'" for c in close) + "."
    else:
        names = src.names
        shown = ", ".join(f"'{n}'" for n in names[:12]) + (" ..." if len(names) > 12 else "")
        hint = f"The file's columns are: {shown}."
    raise InputDataError(
        f"{src.path}: column '{col}' ([channels.{ch.quantity}] column) is not in "
        f"{src.header}. {hint}"
    )


def _file_unit(src: Source, idx: int) -> str | None:
    """The unit the file gives for column ``idx`` (embedded in the name, or its metadata)."""
    unit = split_name_unit(src.names[idx])[1] if idx < len(src.names) else None
    if unit is None and idx < len(src.file_units):
        unit = src.file_units[idx]
    return unit


def _as_text(values: pd.Series) -> pd.Series:
    """Cells as stripped text (None stays None): a parser may hand back numbers (a huge
    integer) or bytes among strings in one object column."""
    s = pd.Series(values, dtype=object)
    if not s.map(lambda v: v is None or isinstance(v, str)).all():
        s = s.map(lambda v: None if v is None or v is pd.NA else str(v))
    return s.str.strip()


#: Longest part of a cell quoted in a message or note (a junk cell may be megabytes).
QUOTE_MAX = 40


def quote_cell(value: object) -> str:
    """A cell as it may be echoed: control characters (NUL included) shown as ``?``, at
    most :data:`QUOTE_MAX` characters with ``...`` when cut."""
    text = re.sub(r"[\x00-\x1f\x7f]", "?", str(value))
    return text if len(text) <= QUOTE_MAX else text[:QUOTE_MAX] + "..."


#: A number with "." grouping the thousands in a decimal-comma file: 1.002 or 12.345,6.
_GROUPED = re.compile(r"[+-]?[1-9]\d{0,2}(?:\.\d{3})+(?:,\d*)?")


class _Column:
    """One raw file column as float64, with its counts of missing and bad cells."""

    grouped = 0  # cells read with "." as thousands separator (decimal-comma files)

    def _ungroup(self, s: pd.Series) -> pd.Series:
        """Thousands separators in a decimal-comma column: where every cell with a "." is of
        the grouped form (1.002, 12.345,6) the dots are removed; a column mixing grouped cells
        with other dotted cells (1.5) cannot be read safely and is refused."""
        dotted = s.str.contains(".", regex=False).fillna(False).to_numpy(dtype=bool)
        if not dotted.any():
            return s
        grouped = s.str.fullmatch(_GROUPED).fillna(False).to_numpy(dtype=bool)
        if (grouped | ~dotted).all():
            self.grouped = int(grouped.sum())
            return s.str.replace(".", "", regex=False)
        other = dotted & ~grouped
        if grouped.any() and other.any():
            a = quote_cell(s[grouped].iloc[0])
            b = quote_cell(s[other].iloc[0])
            raise InputDataError(
                f"cells such as '{a}' (\".\" grouping thousands) and '{b}' (\".\" as a decimal "
                "point) in one column of a decimal-comma file: it cannot be read without "
                "guessing; export the column without thousands separators."
            )
        return s

    def __init__(self, raw: pd.Series, decimal: str) -> None:
        na = raw.isna().to_numpy()
        if pd.api.types.is_bool_dtype(raw.dtype):
            values = raw.to_numpy(dtype=np.float64, na_value=np.nan)
            bad = np.zeros(len(raw), dtype=bool)
        elif pd.api.types.is_numeric_dtype(raw.dtype):
            values = raw.to_numpy(dtype=np.float64, na_value=np.nan)
            bad = np.zeros(len(raw), dtype=bool)
            na = na | (np.isnan(values) & ~na)  # NaN stored in a binary file: missing
        else:
            text = raw.astype(object).where(~na, None)
            s = _as_text(text)
            if decimal == ",":
                s = self._ungroup(s)
                s = s.str.replace(",", ".", regex=False)
            values = pd.to_numeric(s, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
            bad = np.isnan(values) & ~na
        inf = np.isinf(values)
        if inf.any():  # overflow markers read as infinity: count as bad, keep NaN
            values = np.where(inf, np.nan, values)
            bad |= inf
        self.values = values
        self.n_missing = int(na.sum())
        self.n_bad = int(bad.sum())
        self.bad_example = quote_cell(raw.iloc[int(np.argmax(bad))]) if self.n_bad else ""
        self.examples = [quote_cell(v) for v in raw.iloc[np.flatnonzero(~na)[:3]]]


def _localize(ts: pd.Series, tz: str | None, where: str, meta: RunMeta) -> pd.Series:
    """Naive timestamps -> UTC using ``[input] timezone`` (or taken as UTC with a warning)."""
    if tz is None:
        meta.warnings.append(
            f"{where} carries no UTC offset; taken as UTC. Set [input] timezone (e.g. "
            "\"Europe/Berlin\") if it is local time."
        )
        return ts.dt.tz_localize("UTC")
    try:
        probe = ts.dt.tz_localize(tz, ambiguous="NaT", nonexistent="NaT")
    except Exception as exc:  # noqa: BLE001 - pandas raises several types for bad zones
        raise ConfigError(f"[input] timezone '{tz}' is not a known time zone ({exc}).") from None
    ambiguous = (probe.isna() & ts.notna()).to_numpy()
    if not ambiguous.any():
        return probe.dt.tz_convert("UTC")
    # The repeated hour of the autumn change: rows in time order read the hour twice; those
    # before the clock steps back are summer time (DST), those after it standard time.
    wall = ts.to_numpy(dtype="datetime64[ns]").astype("int64").astype(np.float64)
    wall[~ts.notna().to_numpy()] = np.nan
    back = np.r_[False, np.diff(wall) < 0]
    steps = np.cumsum(back)
    first = int(np.flatnonzero(ambiguous)[0])
    is_dst = ambiguous & (steps == steps[first])
    local = ts.dt.tz_localize(tz, ambiguous=is_dst, nonexistent="NaT")
    n_amb = int(ambiguous.sum())
    meta.warnings.append(
        f"{where}: {n_amb} row(s) in the hour the clock repeats at the change to standard time "
        "were placed by the order of the rows (before the step back: summer time)."
    )
    return local.dt.tz_convert("UTC")


#: Common layouts of date and time of day in logger exports, tried in this order: ISO, day
#: first (German and most European exports), US month first with a 12 h clock and AM/PM.
CLOCK_FORMATS = (
    "%Y-%m-%d %H:%M:%S.%f", "%Y-%m-%d %H:%M:%S", "%Y-%m-%d %H:%M",
    "%d.%m.%Y %H:%M:%S.%f", "%d.%m.%Y %H:%M:%S", "%d.%m.%Y %H:%M",
    "%d.%m.%y %H:%M:%S",
    "%m/%d/%Y %I:%M:%S %p", "%m/%d/%Y %I:%M:%S.%f %p", "%m/%d/%Y %I:%M %p",
    "%m/%d/%Y %H:%M:%S.%f", "%m/%d/%Y %H:%M:%S", "%m/%d/%Y %H:%M",
    "%d/%m/%Y %H:%M:%S.%f", "%d/%m/%Y %H:%M:%S", "%d/%m/%Y %H:%M",
    "%Y/%m/%d %H:%M:%S", "%d-%m-%Y %H:%M:%S",
)


def detect_clock_format(cells: list[str]) -> str | None:
    """The first layout of :data:`CLOCK_FORMATS` that reads every one of ``cells`` (a
    sample), or None. Between month-first and day-first with ``/`` the cells decide: a day
    above 12 in either place; ambiguous samples are read month first (US) with a note."""
    sample = [str(c).strip() for c in cells if str(c).strip()][:200]
    if not sample:
        return None
    ser = pd.Series(sample)
    for fmt in CLOCK_FORMATS:
        if pd.to_datetime(ser, format=fmt, errors="coerce").notna().all():
            return fmt
    return None


def _clock_times(
    raw: pd.Series, fmt: str, tz: str | None, meta: RunMeta, column: str
) -> pd.Series:
    """Date-and-time cells in a common layout (``clock``: detected) or a strftime pattern, to
    UTC (naive clocks in ``[input] timezone``; NaT where unreadable)."""
    s = raw.astype(object).where(raw.notna(), None)
    s = _as_text(s)
    if fmt == "clock":
        found = detect_clock_format([str(c) for c in s.dropna().head(200)])
        if found is None:
            examples = ", ".join(f"'{c}'" for c in s.dropna().head(3))
            raise InputDataError(
                f"{meta.source}: time column '{column}' holds no date and time layout dynoqc "
                f"knows (e.g. {examples}); give [channels.time] format as a strftime pattern, "
                "e.g. format = \"%d.%m.%Y %H:%M:%S\"."
            )
        fmt = found
        meta.metadata.setdefault("time_format", fmt)
    ts = pd.to_datetime(s, format=fmt, errors="coerce")
    return _localize(ts, tz, f"Time column '{column}'", meta)


def _iso_times(raw: pd.Series, tz: str | None, meta: RunMeta, column: str) -> pd.Series:
    """Parse ISO 8601 time stamps (or datetime values) to UTC (NaT where unreadable)."""
    if pd.api.types.is_datetime64_any_dtype(raw.dtype):
        if getattr(raw.dt, "tz", None) is None:
            return _localize(raw, tz, f"Time column '{column}'", meta)
        return raw.dt.tz_convert("UTC")
    s = raw.astype(object).where(raw.notna(), None)
    s = _as_text(s)
    first = s.dropna()
    naive = not first.empty and ISO_OFFSET_RE.search(str(first.iloc[0])) is None
    if naive:
        ts = pd.to_datetime(s, format="ISO8601", errors="coerce")
        return _localize(ts, tz, f"Time column '{column}'", meta)
    return pd.to_datetime(s, format="ISO8601", utc=True, errors="coerce")


def start_from_metadata(
    metadata: dict[str, str], tz: str | None, meta: RunMeta
) -> datetime | None:
    """The run start from a metadata line (start_time / start / date ...), as UTC."""
    norm = {re.sub(r"[\s\-]+", "_", k.strip().lower()): v for k, v in metadata.items()}
    for key in START_KEYS:
        if key not in norm:
            continue
        value = norm[key].strip()
        if key == "date" and "time" in norm and not ISO_RE.fullmatch(value):
            value = f"{value} {norm['time'].strip()}"
        if not ISO_RE.fullmatch(value):
            fmt = detect_clock_format([value])
            if fmt is None:
                meta.warnings.append(
                    f"Metadata '{key}: {value}' is not a date and time of day dynoqc can read "
                    "(ISO 8601, day.month.year or US month/day/year); the start time of the "
                    "run is unknown."
                )
                return None
            parsed = _localize(pd.to_datetime(pd.Series([value]), format=fmt, errors="coerce"),
                               tz, f"Metadata start time '{value}'", meta)
            return parsed.iloc[0].to_pydatetime()
        ts = pd.Series([value])
        if ISO_OFFSET_RE.search(value):
            parsed = pd.to_datetime(ts, format="ISO8601", utc=True, errors="coerce")
        else:
            parsed = _localize(
                pd.to_datetime(ts, format="ISO8601", errors="coerce"), tz,
                f"Metadata start time '{value}'", meta,
            )
        if pd.isna(parsed.iloc[0]):
            meta.warnings.append(f"Metadata '{key}: {norm[key]}' could not be read as a time.")
            return None
        return parsed.iloc[0].to_pydatetime()
    return None


#: A backward step whose rows are overtaken again within this many rows is local disorder
#: (rows written out of order), not a logger restart: those rows are dropped.
DISORDER_MAX_ROWS = 10


def _out_of_order_rows(t: np.ndarray) -> np.ndarray:
    """Boolean mask of rows written out of order (rules 3 and 4 of :func:`monotone_time`)."""
    n = t.size
    drop = np.zeros(n, dtype=bool)
    back = np.flatnonzero(np.diff(t) < 0) + 1  # rows whose time is below the previous row's
    if back.size == 0:
        return drop
    # A single row far ahead (a spike): the step back lands above the row before it.
    spike = back >= 2
    spike[spike] = t[back[spike]] > t[back[spike] - 2]
    drop[back[spike] - 1] = True
    rest = back[~spike]
    if rest.size:
        k = np.arange(DISORDER_MAX_ROWS + 1)
        ahead = np.minimum(rest[:, None] + k[None, :], n - 1)
        above = (t[ahead] > t[rest - 1][:, None]) & (rest[:, None] + k[None, :] < n)
        overtaken = above.any(axis=1)
        first = np.argmax(above, axis=1)  # rows rest .. rest + first - 1 are behind
        lengths = np.where(overtaken, first, 0)
        if lengths.sum():
            starts = np.repeat(rest, lengths)
            offs = np.arange(lengths.sum()) - np.repeat(np.cumsum(lengths) - lengths, lengths)
            drop[starts + offs] = True
    return drop


def monotone_time(t: np.ndarray) -> tuple[np.ndarray, np.ndarray, dict[str, float]]:
    """Apply the time-base policy to a NaN-free time array (file order kept).

    Policy (explicit, vectorised):

    1. Rows are never re-ordered.
    2. A row whose time equals the previous row's time is a duplicate-time row: it is dropped,
       the first one is kept.
    3. A single row whose time is ahead of both neighbours, with the next row's time above
       the row before it (a time spike), is dropped.
    4. Rows written out of order: after a backward step, the rows up to the first one whose
       time is above the time before the step are dropped when that happens within
       :data:`DISORDER_MAX_ROWS` rows (e.g. two swapped rows). Nothing else moves.
    5. Any other step backwards in time is a logger restart: the restarted segment is shifted
       so that its first sample follows the previous segment's last sample after one typical
       sample interval (the median of the positive steps; 1 s if there is none).

    Returns (new time for the kept rows, indices of the kept rows, stats) with stats
    ``duplicates`` and ``out_of_order`` (rows dropped), ``restarts`` (backward steps taken as
    restarts) and ``interval`` (s).
    """
    n = len(t)
    if n == 0:
        return t.astype(np.float64), np.arange(0), {
            "duplicates": 0, "out_of_order": 0, "restarts": 0, "interval": 0.0,
        }
    keep = np.ones(n, dtype=bool)
    keep[1:] = np.diff(t) != 0
    idx = np.flatnonzero(keep)
    n_dup = n - idx.size
    tk = t[idx].astype(np.float64)
    d = np.diff(tk)
    positive = d[d > 0]
    interval = float(np.median(positive)) if positive.size else 1.0
    drop = _out_of_order_rows(tk)
    n_disorder = int(drop.sum())
    if n_disorder:
        idx, tk = idx[~drop], tk[~drop]
        again = np.flatnonzero(np.diff(tk) == 0) + 1  # equal times brought together
        if again.size:
            n_dup += again.size
            idx, tk = np.delete(idx, again), np.delete(tk, again)
    back = np.diff(tk) < 0
    if back.any():
        jump = np.where(back, tk[:-1] + interval - tk[1:], 0.0)
        tk = tk + np.concatenate(([0.0], np.cumsum(jump)))
    stats = {
        "duplicates": float(n_dup), "out_of_order": float(n_disorder),
        "restarts": float(back.sum()), "interval": interval,
    }
    return tk, idx, stats


def _column_of(src: Source, raw: pd.Series, p: int) -> _Column:
    """:class:`_Column` of position ``p``; a refusal names the file and the column."""
    try:
        return _Column(raw, src.decimal)
    except InputDataError as exc:
        raise InputDataError(f"{src.path}: column '{src.names[p]}': {exc}") from None


def _count_cells(meta: RunMeta, q: str, name: str, c: _Column) -> None:
    """Record a column's bad (non-numeric) and missing cells in the metadata."""
    if c.grouped:
        meta.warnings.append(
            f"Column '{name}' ({q}): {c.grouped} cell(s) use \".\" to group thousands (e.g. "
            "1.002 = 1002); read so."
        )
    if c.n_bad:
        meta.bad_cells[q] = meta.bad_cells.get(q, 0) + c.n_bad
        meta.warnings.append(
            f"Column '{name}' ({q}): {c.n_bad} non-numeric cell(s) read as missing, "
            f"e.g. '{c.bad_example}'."
        )
    if c.n_missing:
        meta.missing_cells[q] = c.n_missing


def _report_missing(meta: RunMeta) -> None:
    """One sentence per distinct count of empty cells, so a logger dropout that empties every
    column reads as one note, not one per column."""
    by_count: dict[int, list[str]] = {}
    for q, count in meta.missing_cells.items():
        by_count.setdefault(count, []).append(f"'{meta.columns_in.get(q, q)}'")
    for count, names in sorted(by_count.items(), reverse=True):
        where = f"column {names[0]}" if len(names) == 1 else f"each of {len(names)} columns"
        detail = "" if len(names) == 1 else f" ({', '.join(names)})"
        meta.warnings.append(f"{count} empty or missing-marker cell(s) in {where}{detail}.")


def _no_numbers(src: Source, ch: Channel, examples: list[str], wanted: str) -> None:
    """Raise InputDataError: a must-have column holds no usable values."""
    found = ", ".join(f"'{e}'" for e in examples) if examples else "only empty cells"
    hint = src.read_hint
    if ch.quantity == "time":
        hint += " and [channels.time] format" if hint else "Check [channels.time] format"
    hint = f" {hint}." if hint else ""
    raise InputDataError(
        f"{src.path}: column '{ch.column}' ([channels.{ch.quantity}] column) holds no "
        f"{wanted}; found {found}.{hint}"
    )


def _screen(meta: RunMeta, q: str, name: str, values: np.ndarray) -> np.ndarray:
    """Replace readings outside :data:`PHYSICAL_LIMITS` by NaN (counted); count negatives."""
    lo, hi = PHYSICAL_LIMITS.get(q, (-np.inf, np.inf))
    with np.errstate(invalid="ignore"):
        absurd = (values < lo) | (values > hi)
    n_absurd = int(absurd.sum())
    if n_absurd:
        example = values[absurd][0]
        values = np.where(absurd, np.nan, values)
        meta.bad_cells[q] = meta.bad_cells.get(q, 0) + n_absurd
        meta.warnings.append(
            f"Column '{name}' ({q}): {n_absurd} reading(s) outside the physical limits "
            f"{lo:g} to {hi:g} {INPUTS[q].unit} (e.g. {example:g} {INPUTS[q].unit}) read as "
            "missing."
        )
    if q in NOT_NEGATIVE and np.isfinite(values).any():
        # Noise around a zero reading is not a fault: count readings below -5 % of the
        # channel's own full scale (99th percentile of |value|; common practice).
        scale = float(np.nanpercentile(np.abs(values), 99.0))
        with np.errstate(invalid="ignore"):
            neg = values < -NEGATIVE_TOLERANCE * scale
        n_neg = int(neg.sum())
        if n_neg:
            meta.warnings.append(
                f"Column '{name}' ({q}): {n_neg} negative reading(s) beyond zero noise (lowest "
                f"{np.nanmin(values):.4g} {INPUTS[q].unit}); kept as logged."
            )
    return values


#: A hole in a channel longer than this many of its median intervals is not bridged.
GAP_FACTOR = 2.5


def resample(
    ts: np.ndarray, values: np.ndarray, grid: np.ndarray, hold: bool
) -> np.ndarray:
    """Values of one channel on ``grid`` (vectorised): linear or previous-sample hold, NaN
    outside the channel's span and inside holes longer than GAP_FACTOR median intervals."""
    ts = np.asarray(ts, dtype=np.float64)
    v = np.asarray(values, dtype=np.float64)
    out = np.full(grid.shape, np.nan)
    if ts.size == 0:
        return out
    if ts.size == 1:
        out[grid == ts[0]] = v[0]
        return out
    inside = (grid >= ts[0]) & (grid <= ts[-1])
    g = grid[inside]
    right = np.searchsorted(ts, g, side="right")  # first sample after g
    left = np.clip(right - 1, 0, ts.size - 1)
    if hold:
        r = v[left]
    else:
        finite = np.isfinite(v)
        if finite.all():
            r = np.interp(g, ts, v)
        else:  # never interpolate across a missing sample
            r = np.interp(g, ts, np.where(finite, v, 0.0))
            nxt = np.clip(right, 0, ts.size - 1)
            on_sample = ts[left] == g
            r = np.where(on_sample, v[left], np.where(finite[left] & finite[nxt], r, np.nan))
    d = np.diff(ts)
    step = float(np.median(d[d > 0])) if (d > 0).any() else 0.0
    if step > 0:
        nxt = np.clip(right, 0, ts.size - 1)
        hole = (ts[nxt] - ts[left]) > GAP_FACTOR * step
        r = np.where(hole & (ts[left] != g), np.nan, r)
    out[inside] = r
    return out


#: Most rows a configured raster may make.
MAX_RASTER_ROWS = 50_000_000


def build_run(src: Source, config: Config) -> RunData:
    """Map, convert and check the columns of ``src`` into a :class:`RunData`.

    See :func:`pipeline.ingest.read_run` for the contract (cells, units and time policy).
    """
    path = src.path
    meta = RunMeta(source=path, sha256=file_sha256(path), metadata=dict(src.metadata))
    channels = config.channels
    time_ch = channels["time"]
    if time_ch.column is None:  # pragma: no cover - parse_config forbids it
        raise ConfigError("[channels.time] must name a column.")
    positions = _locate_columns(src, channels, meta)
    tpos = positions["time"]
    jpos = _locate(_join_channel(time_ch), src) if time_ch.join_column else None
    fmt = time_ch.format or _time_format_from_cells(src, tpos)
    if fmt is not None and fmt != "seconds":
        fmt = "iso8601" if fmt == "iso8601" and jpos is None else fmt
    text_cols = {tpos} if fmt not in (None, "seconds") else set()
    if jpos is not None:
        text_cols.add(jpos)

    n_notes = len(src.notes)
    wanted = set(positions.values()) | ({jpos} if jpos is not None else set())
    raw = src.load(sorted(wanted), text_cols)
    meta.warnings.extend(src.notes[n_notes:])
    meta.rows_read = len(next(iter(raw.values()))) if raw else 0
    if meta.rows_read == 0:
        raise InputDataError(f"{path}: no data rows{src.rows_note}.")
    fmt = fmt or _time_format_from_values(raw[tpos])

    convs = _conversions(src, config, positions, fmt, meta)
    if "analyzer_mode" in positions:
        mp = positions["analyzer_mode"]
        raw[mp] = _mode_codes(raw[mp], config, meta)
    iso_pos = tpos if fmt != "seconds" else None
    cols = {p: _column_of(src, raw[p], p) for p in set(positions.values()) if p != iso_pos}
    for q, p in positions.items():
        if p != iso_pos:
            _count_cells(meta, q, src.names[p], cols[p])

    if iso_pos is not None:
        traw = raw[tpos]
        if jpos is not None:
            traw = (traw.astype(object).where(traw.notna(), "").astype(str).str.strip() + " "
                    + raw[jpos].astype(object).where(raw[jpos].notna(), "").astype(str)
                    .str.strip()).str.strip().replace("", None)
        t_sec = _iso_seconds(src, config, traw, meta, fmt)
    else:
        t_sec = _elapsed_seconds(src, config, cols[tpos], convs["time"], meta)
    values = _channel_values(src, channels, positions, cols, convs, iso_pos, meta)
    _hold_slow_channels(values, meta)
    _report_missing(meta)
    t_new, rows = _time_policy(t_sec, meta)
    _report_zero_fuel(meta, values, t_new, rows)

    raster = config.input.raster_s if src.kind != "MDF" else None  # MDF: resampled on load
    out: dict[str, np.ndarray] = {"time": t_new}
    whole = rows.size == t_sec.size  # every row kept, in order: no need to copy the columns
    for q in (q for q in INPUTS if q in channels and q != "time"):
        ch = channels[q]
        if q in values:
            out[q] = values[q] if whole else values[q][rows]
        else:
            assert ch.value is not None
            v = float(convs[q](np.float64(ch.value)))
            if q == "thc" and ch.carbon_number != 1:
                v *= ch.carbon_number
            out[q] = np.full(rows.size, v)
    if raster:
        out = _on_raster(out, float(raster), meta)
    return RunData(frame=columns_frame(out), meta=meta)


#: Channels that are states, not measurements: held, never interpolated, on a raster.
HELD_CHANNELS = ("analyzer_mode",)


def _on_raster(out: dict[str, np.ndarray], raster: float, meta: RunMeta) -> dict[str, np.ndarray]:
    """Every channel on the regular time base ``[input] raster_s`` (:func:`resample`: linear
    for measurements, held for states, NaN across holes)."""
    t = out["time"]
    if t.size < 2:
        return out
    n = int(np.floor((t[-1] - t[0]) / raster + 1e-9)) + 1
    if n > MAX_RASTER_ROWS:
        raise ConfigError(
            f"[input] raster_s = {raster:g} s over {t[-1] - t[0]:g} s gives {n} rows; choose "
            "a coarser raster."
        )
    grid = t[0] + raster * np.arange(n, dtype=np.float64)
    meta.warnings.append(
        f"Resampled from {t.size} rows to the configured raster of {raster:g} s ({n} rows)."
    )
    return {"time": grid} | {
        q: resample(t, v, grid, q in HELD_CHANNELS) for q, v in out.items() if q != "time"
    }


#: Words of text bench-status columns understood without a ``states`` table (case and
#: blanks ignored; common practice of English and German bench exports).
DEFAULT_STATE_WORDS: dict[str, tuple[str, ...]] = {
    "sample": ("sample", "sampling", "measure", "measuring", "meas", "mess", "messen",
               "messung", "run", "exhaust"),
    "zero": ("zero", "zero gas", "zerogas", "null", "nullgas", "nullen", "nullpunkt"),
    "span": ("span", "span gas", "spangas", "cal", "kal", "kalib", "kalibrieren", "endpunkt"),
    "purge": ("purge", "back purge", "backpurge", "backflush", "blowback", "spuelen",
              "spülen", "ruckspulen", "rückspülen", "spul"),
    "leak_check": ("leak", "leak check", "leakcheck", "dicht", "dichtheit"),
}


def _mode_codes(raw: pd.Series, config: Config, meta: RunMeta) -> pd.Series:
    """A text ``analyzer_mode`` column as its numeric codes: 0 sample, the
    ``[drift_correction]`` zero and span codes, 3 purge, 4 leak check (words from
    ``[channels.analyzer_mode] states``, else :data:`DEFAULT_STATE_WORDS`). Numeric columns
    pass unchanged; unknown words stay text (bad cells, counted)."""
    if pd.api.types.is_numeric_dtype(raw.dtype) or pd.api.types.is_bool_dtype(raw.dtype):
        return raw
    dc = config.drift_correction
    codes = {"sample": 0.0, "zero": float(dc.zero_mode), "span": float(dc.span_mode),
             "purge": 3.0, "leak_check": 4.0}
    words = config.channels["analyzer_mode"].states or DEFAULT_STATE_WORDS

    def norm(x: object) -> str:
        return re.sub(r"[\s_\-]+", " ", str(x).strip().lower())

    table = {norm(w): codes[state] for state, ws in words.items() for w in ws}
    text = raw.astype(object).where(raw.notna(), None)
    keys = pd.Series(text, dtype=object).map(lambda x: None if x is None else norm(x))
    mapped = keys.map(table)
    known = mapped.notna() | keys.isna()
    out = raw.astype(object).copy()
    out[mapped.notna()] = mapped[mapped.notna()].map(repr)  # numbers as text, parsed next
    if mapped.notna().any():
        meta.warnings.append(
            f"analyzer_mode is text: {int(mapped.notna().sum())} cell(s) read as bench states "
            f"({', '.join(sorted({quote_cell(v) for v in raw[mapped.notna()].unique()[:6]}))})."
        )
    if not known.all():
        unknown = sorted({quote_cell(v) for v in raw[~known].unique()[:5]})
        meta.warnings.append(
            f"analyzer_mode: unknown bench state word(s) {', '.join(unknown)}; name them in "
            "[channels.analyzer_mode] states."
        )
    return out


def _join_channel(ch: Channel) -> Channel:
    """The time channel's second (time-of-day) column as a channel of its own, to locate it."""
    import dataclasses

    return dataclasses.replace(ch, column=ch.join_column, join_column=None)


def _locate_columns(src: Source, channels: dict[str, Channel], meta: RunMeta) -> dict[str, int]:
    """Position in ``src`` of every channel mapped to a column (noted in ``meta``)."""
    positions: dict[str, int] = {}
    for q, ch in channels.items():
        if ch.column is None:
            continue
        if q == "time" and src.fallback_time is not None:
            idx = find_column(ch.column, src.names)
            if idx is None:
                idx = src.fallback_time
                meta.warnings.append(
                    f"[channels.time] column '{ch.column}' is not a channel of the {src.kind} "
                    f"file; its own time base '{src.names[idx]}' is used."
                )
            positions[q] = idx
            continue
        positions[q] = _locate(ch, src)
    for q, idx in positions.items():
        dups = [i for i, n in enumerate(src.names) if n == src.names[idx]]
        if len(dups) > 1:
            meta.warnings.append(
                f"Column '{src.names[idx]}' ({q}) appears {len(dups)} times in {src.header}; "
                "the first one is used."
            )
    meta.columns_in = {q: src.names[i] for q, i in positions.items()}
    return positions


def _mostly_iso(cells: list[str]) -> str:
    """``iso8601`` when most cells are ISO time stamps, ``clock`` when they are dates and
    times in another common layout, else ``seconds``."""
    iso = sum(1 for c in cells if ISO_RE.fullmatch(c))
    if cells and iso * 2 > len(cells):
        return "iso8601"
    return "clock" if cells and detect_clock_format(cells) is not None else "seconds"


def _time_format_from_cells(src: Source, tpos: int) -> str | None:
    """ISO 8601 when most sampled time cells look like it, else seconds; None when the
    source cannot show cells before loading."""
    if src.time_cells is None:
        return None
    return _mostly_iso(src.time_cells(tpos))


def _time_format_from_values(traw: pd.Series) -> str:
    """The time format of a loaded time column (datetime, numbers or text)."""
    if pd.api.types.is_datetime64_any_dtype(traw.dtype):
        return "iso8601"
    if pd.api.types.is_numeric_dtype(traw.dtype):
        return "seconds"
    return _mostly_iso([str(c).strip() for c in traw.dropna().head(50)])


def _conversions(
    src: Source, config: Config, positions: dict[str, int], fmt: str, meta: RunMeta
) -> dict[str, Conversion]:
    """Unit conversion per channel: the config's unit; the file's unit fills in when the
    config left it implicit (noted in ``meta.units_in``)."""
    path, density = src.path, config.fuel.density_kg_per_m3
    std = config.input.standard_state
    convs: dict[str, Conversion] = {}
    for q, ch in config.channels.items():
        if q == "time" and fmt != "seconds":
            meta.units_in[q] = "ISO 8601" if fmt == "iso8601" else f"clock ({fmt})"
            continue
        unit = ch.unit
        file_unit = _file_unit(src, positions[q]) if q in positions else None
        if not ch.unit_given and unit == UNIT_FROM_FILE and q in positions:
            col = src.names[positions[q]]
            if not file_unit:
                raise ConfigError(
                    f"{path}: [channels.{q}] gives no unit and {src.kind} column '{col}' has "
                    f"none either; add unit = \"...\" to [channels.{q}] in {config.path} "
                    f"(canonical: {INPUTS[q].unit})."
                )
            convs[q] = conversion(file_unit, q, f"{path}: column '{col}' ([channels.{q}])",
                                  density, std)
            _file_basis_agrees(path, q, col, file_unit, ch.basis)
            meta.units_in[q] = file_unit
            continue
        conv = conversion(unit, q, f"[channels.{q}] unit", density, std)
        if file_unit:
            try:
                fconv = conversion(file_unit, q, f"column '{src.names[positions[q]]}'",
                                   density, std)
            except ConfigError:
                fconv = None
            if fconv is not None and not ch.unit_given:
                conv, unit = fconv, file_unit
            elif fconv is not None and not fconv.same_as(conv):
                meta.warnings.append(
                    f"Column '{src.names[positions[q]]}' ({q}): the file gives unit "
                    f"'{file_unit}' but [channels.{q}] unit is '{ch.unit}'; the config unit is "
                    "used. Check which is right."
                )
        if q == "thc" and re.fullmatch(r"(?i)\s*ppm\s*c1?\s*", unit) and ch.carbon_number != 1:
            raise ConfigError(
                f"[channels.thc] unit '{unit}' is already on a C1 basis, but carbon_number = "
                f"{ch.carbon_number:g}; use carbon_number = 1 or the unit ppm."
            )
        convs[q] = conv
        meta.units_in[q] = unit
    return convs


def _file_basis_agrees(path: Path, q: str, col: str, unit: str, basis: str | None) -> None:
    """A basis in the file's unit (``%vol dry``) must agree with the config's ``basis``."""
    from ..units import split_basis

    _, in_unit = split_basis(unit)
    if in_unit is not None and basis is not None and in_unit != basis:
        raise ConfigError(
            f"{path}: column '{col}' gives unit '{unit}' ({in_unit}), but [channels.{q}] "
            f"basis = \"{basis}\"; check which is right and make them agree."
        )


def _iso_seconds(
    src: Source, config: Config, traw: pd.Series, meta: RunMeta, fmt: str = "iso8601"
) -> np.ndarray:
    """Seconds since the first readable time stamp (which is the run's start): ISO 8601, or
    date and time of day in a common layout (``clock``) or a strftime pattern."""
    tname = meta.columns_in["time"]
    if config.channels["time"].join_column:
        tname = f"{tname}' + '{config.channels['time'].join_column}"
    if fmt == "iso8601":
        ts = _iso_times(traw, config.input.timezone, meta, tname)
    else:
        ts = _clock_times(traw, fmt, config.input.timezone, meta, tname)
    nat = ts.isna().to_numpy()
    na = traw.isna().to_numpy()
    bad = nat & ~na
    if na.any():
        meta.warnings.append(
            f"Column '{tname}' (time): {int(na.sum())} empty or missing-marker cell(s)."
        )
    if bad.any():
        meta.bad_cells["time"] = int(bad.sum())
        meta.warnings.append(
            f"Column '{tname}' (time): {int(bad.sum())} cell(s) are not "
            f"{'ISO 8601 time stamps' if fmt == 'iso8601' else 'readable dates and times'}, "
            f"e.g. '{quote_cell(traw[bad].iloc[0])}'."
        )
    if nat.all():
        examples = [quote_cell(v) for v in traw[~na].head(3)]
        _no_numbers(src, config.channels["time"], examples, "ISO 8601 time stamps")
    t0 = ts[~nat].iloc[0]
    meta.start_time = t0.to_pydatetime()
    meta.metadata.setdefault("start_time_source", f"first time stamp of column '{tname}'")
    return ((ts - t0).dt.total_seconds()).to_numpy(dtype=np.float64, na_value=np.nan)


def _elapsed_seconds(
    src: Source, config: Config, tcol: _Column, conv: Conversion, meta: RunMeta
) -> np.ndarray:
    """Elapsed time in seconds; the run's start from the file's header or metadata."""
    if np.isnan(tcol.values).all():
        _no_numbers(src, config.channels["time"], tcol.examples, "numbers (elapsed time)")
    if src.start_time is not None:
        meta.start_time = src.start_time
        meta.metadata.setdefault("start_time_source", src.start_source)
    else:
        meta.start_time = start_from_metadata(src.metadata, config.input.timezone, meta)
        if meta.start_time is not None:
            meta.metadata.setdefault("start_time_source", "file metadata")
    return conv(tcol.values)


def _channel_values(
    src: Source,
    channels: dict[str, Channel],
    positions: dict[str, int],
    cols: dict[int, _Column],
    convs: dict[str, Conversion],
    iso_pos: int | None,
    meta: RunMeta,
) -> dict[str, np.ndarray]:
    """Every channel but time in canonical units: must-have / may-be-empty, then the
    physical-limit screen."""
    values: dict[str, np.ndarray] = {}
    for q, p in positions.items():
        if q == "time" or p == iso_pos:
            continue
        c = cols[p]
        if np.isnan(c.values).all():
            if q in MUST_HAVE_NUMBERS:
                _no_numbers(src, channels[q], c.examples, "numbers")
            meta.warnings.append(
                f"Column '{src.names[p]}' ({q}) holds no numbers; {q} is all missing."
            )
        v = convs[q](c.values)
        if q == "thc" and channels[q].carbon_number != 1:
            v = v * channels[q].carbon_number
        values[q] = np.asarray(v, dtype=np.float64)
    for q, v in values.items():  # gauge pressures: the ambient pressure is added
        if convs[q].gauge:
            amb = values.get("ambient_pressure")
            if amb is None and channels.get("ambient_pressure") is not None:
                amb = np.full(v.size, float(convs["ambient_pressure"](
                    np.float64(channels["ambient_pressure"].value))))
            if amb is None:
                amb = np.full(v.size, P_STD_KPA)
                meta.warnings.append(
                    f"{q} is logged as a gauge pressure ('{convs[q].unit}') and no "
                    "ambient_pressure is mapped: 101.325 kPa is added to make it absolute."
                )
            else:
                meta.warnings.append(f"{q} is a gauge pressure ('{convs[q].unit}'); the "
                                     "ambient pressure is added to make it absolute.")
            values[q] = v + amb
    for q in list(values):
        values[q] = _screen(meta, q, src.names[positions[q]], values[q])
    return values


#: A channel is slow (logged at its own, lower rate into a faster file) when at most this
#: fraction of its cells hold values ...
SLOW_MAX_FILLED = 0.7
#: ... and at least this fraction of the steps between its values are one common step of
#: two or more rows (common practice: a 1 Hz bench merged into a 10 Hz log) ...
SLOW_REGULAR_FRACTION = 0.8
#: ... over at least this many updates (fewer say nothing about a rate).
SLOW_MIN_UPDATES = 20


def _hold_slow_channels(values: dict[str, np.ndarray], meta: RunMeta) -> None:
    """Channels logged at a lower rate than the file (values on every k-th row, empty cells
    between) hold each value until their next update, for at most k - 1 rows: a longer
    silence stays missing, and counts as a gap only when it lasts several of the channel's own
    intervals (``meta.update_rows``). In place; noted in ``meta``."""
    for q, v in values.items():
        finite = np.isfinite(v)
        n_fin = int(finite.sum())
        if n_fin < SLOW_MIN_UPDATES or n_fin > SLOW_MAX_FILLED * v.size:
            continue
        idx = np.flatnonzero(finite)
        steps = np.diff(idx)
        k = int(np.median(steps))
        if k < 2 or np.mean(steps == k) < SLOW_REGULAR_FRACTION:
            continue
        last = np.maximum.accumulate(np.where(finite, np.arange(v.size), -1))
        hold = ~finite & (last >= 0) & (np.arange(v.size) - last < k)
        v = v.copy()  # the column may be a read-only view of the parser's buffer
        v[hold] = v[last[hold]]
        values[q] = v
        meta.update_rows[q] = k
        if q in meta.missing_cells:
            meta.missing_cells[q] = max(0, meta.missing_cells[q] - int(hold.sum()))
    if meta.update_rows:
        by_k: dict[int, list[str]] = {}
        for q, k in meta.update_rows.items():
            by_k.setdefault(k, []).append(f"'{meta.columns_in.get(q, q)}'")
        for k, names in sorted(by_k.items()):
            meta.warnings.append(
                f"{', '.join(names)} hold a value on every {k}th row only (logged at a lower "
                "rate); each value is held until the next update."
            )


def _time_policy(t_sec: np.ndarray, meta: RunMeta) -> tuple[np.ndarray, np.ndarray]:
    """The time-base policy (:func:`monotone_time`): (new time base, rows kept)."""
    valid = np.isfinite(t_sec)
    n_nan = int((~valid).sum())
    rows = np.flatnonzero(valid)
    t_new, kept, stats = monotone_time(t_sec[rows])
    rows = rows[kept]
    if n_nan:
        meta.warnings.append(f"{n_nan} row(s) without a readable time were dropped.")
    if stats["duplicates"]:
        meta.warnings.append(
            f"{int(stats['duplicates'])} row(s) repeating the previous row's time were dropped "
            "(the first of each is kept)."
        )
    if stats["out_of_order"]:
        meta.warnings.append(
            f"{int(stats['out_of_order'])} row(s) written out of order (time at or below an "
            "earlier row's, then the log goes on) were dropped; nothing else was moved."
        )
    if stats["restarts"]:
        meta.warnings.append(
            f"Time goes backwards {int(stats['restarts'])} time(s) (logger restart?); each "
            f"restarted segment is placed one sample interval ({stats['interval']:g} s) after "
            "the previous one, in file order."
        )
    meta.rows_dropped = meta.rows_read - rows.size
    if rows.size == 0:  # pragma: no cover - the time column holds numbers here
        raise InputDataError(f"{meta.source}: no rows with a readable time.")
    return t_new, rows


def _report_zero_fuel(
    meta: RunMeta, values: dict[str, np.ndarray], t: np.ndarray, rows: np.ndarray
) -> None:
    """A note on the rows where the fuel flow reads zero or less (fuel cut, meter at rest):
    lambda from flows is undefined there (written as NaN)."""
    fuel = values.get("fuel_mass_flow")
    if fuel is None:
        return
    f = fuel[rows]
    with np.errstate(invalid="ignore"):
        cut = f <= 0
    n_cut = int(cut.sum())
    if n_cut:
        dt = float(np.median(np.diff(t))) if t.size > 1 else 0.0
        meta.warnings.append(
            f"Fuel flow ({meta.columns_in.get('fuel_mass_flow', 'fuel_mass_flow')}) reads zero "
            f"or less on {n_cut} row(s) (about {n_cut * dt / 60.0:.1f} min, fuel cut or meter at "
            "rest); lambda from the flows is undefined (NaN) there."
        )
