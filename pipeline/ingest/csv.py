"""Phase two of reading a logger export: fast parse, column mapping, units, time base.

:func:`read_csv_run` sniffs the layout (:mod:`pipeline.ingest.sniff`), then parses only the
mapped columns with the pandas C engine (integer ``skiprows``, ``usecols``; measured the
fastest option on 2 cores, ECOSYSTEM.md section 2.2), coerces them to numbers, counts what
could not be read, converts to canonical units and builds the run's time base.
"""

from __future__ import annotations

import difflib
import hashlib
import re
import warnings
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd

from ..config import Channel, Config
from ..data import RunData, RunMeta
from ..errors import ConfigError, InputDataError
from ..quantities import INPUTS
from ..units import Conversion, conversion, is_known_unit
from .sniff import ISO_OFFSET_RE, ISO_RE, MISSING_MARKERS, Layout, sniff

#: Channels that must hold numbers; the others may be entirely empty (with a warning).
MUST_HAVE_NUMBERS = ("time", "fuel_mass_flow", "air_mass_flow")

#: Metadata keys (normalised: lower case, ``_`` for blanks) that give the start of the run,
#: in order of preference.
START_KEYS = (
    "start_time", "starttime", "start_datetime", "start_date_time", "test_start", "start",
    "datetime", "date_time", "timestamp", "date",
)

_EMBEDDED_UNIT_RES = (
    re.compile(r"^(?P<name>.*?)\s*\[(?P<unit>[^\[\]]*)\]$"),
    re.compile(r"^(?P<name>.*?)\s*\((?P<unit>[^()]*)\)$"),
    re.compile(r"^(?P<name>[^/]*?)\s*/\s*(?P<unit>.+)$"),
)


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


def _find_column(ch: Channel, layout: Layout) -> int:
    """Index of the channel's column in the names row (exact name first, then bare name)."""
    col = ch.column
    assert col is not None
    names = layout.names
    hits = [i for i, n in enumerate(names) if n == col]
    if not hits:
        hits = [i for i, n in enumerate(names) if split_name_unit(n)[0] == col]
    if not hits:
        hits = [i for i, n in enumerate(names) if n.strip() == col.strip()]
    if hits:
        return hits[0]
    pool = list(dict.fromkeys([n for n in names if n] + [split_name_unit(n)[0] for n in names]))
    folded: dict[str, str] = {}
    for n in pool:
        folded.setdefault(n.casefold(), n)
    close = [folded[c] for c in difflib.get_close_matches(col.casefold(), folded, n=3, cutoff=0.5)]
    if close:
        hint = "Close matches: " + ", ".join(f"'{c}'" for c in close) + "."
    else:
        shown = ", ".join(f"'{n}'" for n in names[:12]) + (" ..." if len(names) > 12 else "")
        hint = f"The file's columns are: {shown}."
    raise InputDataError(
        f"{layout.path}: column '{col}' ([channels.{ch.quantity}] column) is not in the names "
        f"row (line {layout.names_line + 1}). {hint}"
    )


def _file_unit(layout: Layout, idx: int) -> str | None:
    """The unit the file gives for column ``idx`` (embedded in the name, or the units row)."""
    unit = split_name_unit(layout.names[idx])[1] if idx < len(layout.names) else None
    if unit is None and layout.units is not None and idx < len(layout.units):
        unit = layout.units[idx]
    return unit


def _parse(layout: Layout, positions: list[int], text_cols: set[int]) -> pd.DataFrame:
    """Read the mapped columns of the data block (all rows) with the pandas C engine."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", pd.errors.ParserWarning)  # "falling back" notes
            df = pd.read_csv(
                layout.path,
                sep=layout.delimiter,
                decimal=layout.decimal,
                header=None,
                skiprows=layout.data_line,
                usecols=positions,
                index_col=False,
                dtype={p: str for p in text_cols} or None,
                na_values=list(MISSING_MARKERS),
                keep_default_na=False,
                skipinitialspace=True,
                skip_blank_lines=True,
                encoding=layout.encoding,
                encoding_errors="replace",
                compression=layout.compression,
                engine="c",
                low_memory=False,
                on_bad_lines="error",  # (extra fields are ignored with usecols)
            )
    except pd.errors.EmptyDataError:
        raise InputDataError(f"{layout.path}: no data rows below the header.") from None
    except (pd.errors.ParserError, ValueError, OSError, EOFError) as exc:
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputDataError(f"{layout.path}: cannot parse the data block ({msg}).") from None
    missing = [p for p in positions if p not in df.columns]
    if missing:  # pragma: no cover - usecols guarantees the columns
        raise InputDataError(f"{layout.path}: data rows have fewer columns than the header.")
    return df


class _Column:
    """One parsed file column as float64, with its counts of missing and bad cells."""

    def __init__(self, raw: pd.Series, decimal: str) -> None:
        na = raw.isna().to_numpy()
        if pd.api.types.is_numeric_dtype(raw.dtype) and not pd.api.types.is_bool_dtype(raw):
            values = raw.to_numpy(dtype=np.float64, na_value=np.nan)
            bad = np.zeros(len(raw), dtype=bool)
        else:
            text = raw.astype(object).where(~na, None)
            s = pd.Series(text, dtype=object).str.strip()
            if decimal == ",":
                s = s.str.replace(",", ".", regex=False)
            values = pd.to_numeric(s, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
            bad = np.isnan(values) & ~na
        inf = np.isinf(values)
        if inf.any():  # overflow markers read as infinity: count as bad, keep NaN
            values = np.where(inf, np.nan, values)
            bad |= inf
        self.raw = raw
        self.values = values
        self.n_missing = int(na.sum())
        self.n_bad = int(bad.sum())
        self.bad_example = str(raw[bad].iloc[0]) if self.n_bad else ""
        self.examples = [str(v) for v in raw[~na].head(3)]


def _localize(ts: pd.Series, tz: str | None, where: str, meta: RunMeta) -> pd.Series:
    """Naive timestamps -> UTC using ``[input] timezone`` (or taken as UTC with a warning)."""
    if tz is None:
        meta.warnings.append(
            f"{where} carries no UTC offset; taken as UTC. Set [input] timezone (e.g. "
            "\"Europe/Berlin\") if it is local time."
        )
        return ts.dt.tz_localize("UTC")
    try:
        local = ts.dt.tz_localize(tz, ambiguous="NaT", nonexistent="NaT")
    except Exception as exc:  # noqa: BLE001 - pandas raises several types for bad zones
        raise ConfigError(f"[input] timezone '{tz}' is not a known time zone ({exc}).") from None
    return local.dt.tz_convert("UTC")


def _iso_times(raw: pd.Series, tz: str | None, meta: RunMeta, column: str) -> pd.Series:
    """Parse ISO 8601 time stamps to UTC (NaT where unreadable)."""
    s = raw.astype(object).where(raw.notna(), None)
    s = pd.Series(s, dtype=object).str.strip()
    first = s.dropna()
    naive = not first.empty and ISO_OFFSET_RE.search(str(first.iloc[0])) is None
    if naive:
        ts = pd.to_datetime(s, format="ISO8601", errors="coerce")
        return _localize(ts, tz, f"Time column '{column}'", meta)
    return pd.to_datetime(s, format="ISO8601", utc=True, errors="coerce")


def _start_from_metadata(
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
            meta.warnings.append(
                f"Metadata '{key}: {value}' is not an ISO 8601 date and time of day; the start "
                "time of the run is unknown."
            )
            return None
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


def monotone_time(t: np.ndarray) -> tuple[np.ndarray, np.ndarray, dict[str, float]]:
    """Apply the time-base policy to a NaN-free time array (file order kept).

    Policy (simple and explicit; refined later):

    1. Rows are never re-ordered.
    2. A row whose time equals the previous row's time is an exact duplicate-time row: it is
       dropped, the first one is kept.
    3. A step backwards in time is taken as a logger restart: the restarted segment is
       shifted so that its first sample follows the previous segment's last sample after one
       typical sample interval (the median of the positive steps; 1 s if there is none).

    Returns (new time for the kept rows, indices of the kept rows, stats) with stats
    ``duplicates`` (rows dropped), ``restarts`` (backward steps) and ``interval`` (s).
    """
    n = len(t)
    if n == 0:
        return t.astype(np.float64), np.arange(0), {"duplicates": 0, "restarts": 0, "interval": 0.0}
    keep = np.ones(n, dtype=bool)
    keep[1:] = np.diff(t) != 0
    idx = np.flatnonzero(keep)
    tk = t[idx].astype(np.float64)
    d = np.diff(tk)
    positive = d[d > 0]
    interval = float(np.median(positive)) if positive.size else 1.0
    back = d < 0
    if back.any():
        jump = np.where(back, tk[:-1] + interval - tk[1:], 0.0)
        tk = tk + np.concatenate(([0.0], np.cumsum(jump)))
    stats = {"duplicates": float(n - idx.size), "restarts": float(back.sum()), "interval": interval}
    return tk, idx, stats


def read_csv_run(path: Path, config: Config) -> RunData:
    """Read a CSV/TSV logger export (optionally gzip-compressed) into canonical units.

    See :func:`pipeline.ingest.read_run` for the contract. The input file is only read.
    """
    path = Path(path)
    if not path.exists():
        raise InputDataError(f"{path}: file not found.")
    if not path.is_file():
        raise InputDataError(f"{path}: not a file.")
    if path.stat().st_size == 0:
        raise InputDataError(f"{path}: the file is empty.")
    layout = sniff(path, config.input)
    meta = RunMeta(source=path, sha256=file_sha256(path), metadata=dict(layout.metadata))

    channels = config.channels
    time_ch = channels["time"]
    if time_ch.column is None:  # pragma: no cover - parse_config forbids it
        raise ConfigError("[channels.time] must name a column.")
    positions: dict[str, int] = {}
    for q, ch in channels.items():
        if ch.column is not None:
            positions[q] = _find_column(ch, layout)
    for q, idx in positions.items():
        dups = [i for i, n in enumerate(layout.names) if n == layout.names[idx]]
        if len(dups) > 1:
            meta.warnings.append(
                f"Column '{layout.names[idx]}' ({q}) appears {len(dups)} times in the names row; "
                "the first one is used."
            )
    meta.columns_in = {q: layout.names[i] for q, i in positions.items()}

    # Time format: configured, else ISO 8601 when the sampled time cells look like it.
    tpos = positions["time"]
    fmt = time_ch.format
    if fmt is None:
        cells = [r[tpos] for r in layout.sample_rows if tpos < len(r) and r[tpos]]
        iso = sum(1 for c in cells if ISO_RE.fullmatch(c))
        fmt = "iso8601" if cells and iso * 2 > len(cells) else "seconds"

    raw_channels = config.raw.get("channels", {}) if isinstance(config.raw, dict) else {}
    density = config.fuel.density_kg_per_m3

    # Units (checked before the bulk parse): the config's unit; the file's unit fills in when
    # the config left it implicit.
    convs: dict[str, Conversion] = {}
    for q, ch in channels.items():
        explicit = isinstance(raw_channels.get(q), dict) and "unit" in raw_channels[q]
        unit = ch.unit
        file_unit = _file_unit(layout, positions[q]) if q in positions else None
        if q == "time" and fmt == "iso8601":
            meta.units_in[q] = "ISO 8601"
            continue
        conv = conversion(unit, q, f"[channels.{q}] unit", density)
        if file_unit:
            try:
                fconv = conversion(file_unit, q, f"column '{layout.names[positions[q]]}'", density)
            except ConfigError:
                fconv = None
            if fconv is not None and not explicit:
                conv, unit = fconv, file_unit
            elif fconv is not None and not fconv.same_as(conv):
                meta.warnings.append(
                    f"Column '{layout.names[positions[q]]}' ({q}): the file gives unit "
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

    df = _parse(layout, sorted(set(positions.values())), {tpos} if fmt == "iso8601" else set())
    meta.rows_read = len(df)
    if meta.rows_read == 0:
        raise InputDataError(f"{path}: no data rows below the header.")

    iso_pos = tpos if fmt == "iso8601" else None
    cols = {p: _Column(df[p], layout.decimal) for p in set(positions.values()) if p != iso_pos}
    for q, p in positions.items():
        if p == iso_pos:
            continue
        _count_cells(meta, q, layout.names[p], cols[p])
    _report_missing(meta)

    # Time in seconds (before the policy).
    tname = layout.names[tpos]
    if iso_pos is not None:
        raw = df[tpos]
        ts = _iso_times(raw, config.input.timezone, meta, tname)
        nat = ts.isna().to_numpy()
        na = raw.isna().to_numpy()
        bad = nat & ~na
        if na.any():
            meta.warnings.append(
                f"Column '{tname}' (time): {int(na.sum())} empty or missing-marker cell(s)."
            )
        if bad.any():
            meta.bad_cells["time"] = int(bad.sum())
            meta.warnings.append(
                f"Column '{tname}' (time): {int(bad.sum())} cell(s) are not ISO 8601 time "
                f"stamps, e.g. '{raw[bad].iloc[0]}'."
            )
        if nat.all():
            examples = [str(v) for v in raw[~na].head(3)]
            _no_numbers(layout, time_ch, examples, "ISO 8601 time stamps")
        t0 = ts[~nat].iloc[0]
        t_sec = ((ts - t0).dt.total_seconds()).to_numpy(dtype=np.float64, na_value=np.nan)
        meta.start_time = t0.to_pydatetime()
    else:
        tcol = cols[tpos]
        if np.isnan(tcol.values).all():
            _no_numbers(layout, time_ch, tcol.examples, "numbers (elapsed time)")
        t_sec = convs["time"](tcol.values)
        meta.start_time = _start_from_metadata(layout.metadata, config.input.timezone, meta)

    # Other channels must-have / may-be-empty.
    for q, p in positions.items():
        if q == "time" or p == iso_pos:
            continue
        c = cols[p]
        if np.isnan(c.values).all():
            if q in MUST_HAVE_NUMBERS:
                _no_numbers(layout, channels[q], c.examples, "numbers")
            meta.warnings.append(
                f"Column '{layout.names[p]}' ({q}) holds no numbers; {q} is all missing."
            )

    # Time-base policy.
    valid = ~np.isnan(t_sec)
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
    if stats["restarts"]:
        meta.warnings.append(
            f"Time goes backwards {int(stats['restarts'])} time(s) (logger restart?); each "
            f"restarted segment is placed one sample interval ({stats['interval']:g} s) after "
            "the previous one, in file order."
        )
    meta.rows_dropped = meta.rows_read - rows.size
    if rows.size == 0:  # pragma: no cover - the time column holds numbers here
        raise InputDataError(f"{path}: no rows with a readable time.")

    out: dict[str, np.ndarray] = {"time": t_new}
    order = [q for q in INPUTS if q in channels and q != "time"]
    n = rows.size
    for q in order:
        ch = channels[q]
        if q in positions:
            values = convs[q](cols[positions[q]].values[rows])
        else:
            assert ch.value is not None
            values = np.full(n, float(convs[q](np.float64(ch.value))))
        if q == "thc" and ch.carbon_number != 1:
            values = values * ch.carbon_number
        out[q] = np.asarray(values, dtype=np.float64)
    frame = pd.DataFrame(out)
    return RunData(frame=frame, meta=meta)


def _count_cells(meta: RunMeta, q: str, name: str, c: _Column) -> None:
    """Record a column's bad (non-numeric) and missing cells in the metadata."""
    if c.n_bad:
        meta.bad_cells[q] = c.n_bad
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


def _no_numbers(layout: Layout, ch: Channel, examples: list[str], wanted: str) -> None:
    """Raise InputDataError: a must-have column holds no usable values."""
    found = ", ".join(f"'{e}'" for e in examples) if examples else "only empty cells"
    detected = " (detected)" if layout.detected.get("decimal") else ""
    hint = " and [channels.time] format" if ch.quantity == "time" else ""
    raise InputDataError(
        f"{layout.path}: column '{ch.column}' ([channels.{ch.quantity}] column) holds no "
        f"{wanted}; found {found}. The file was read with delimiter "
        f"'{_show(layout.delimiter)}' and decimal '{layout.decimal}'{detected}; check "
        f"[input] delimiter/decimal{hint}."
    )


def _show(delimiter: str) -> str:
    return "\\t" if delimiter == "\t" else delimiter
