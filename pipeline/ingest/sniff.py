"""Phase one of reading a logger export: work out the layout from the first lines.

Plain Python on a small sample (the first :data:`SAMPLE_LINES` lines): encoding, delimiter,
decimal mark, comment and metadata lines, the names row, an optional units row and the line
where the data start. The bulk of the file is then parsed by the fast reader in
:mod:`pipeline.ingest.delimited` with these settings.
"""

from __future__ import annotations

import csv
import gzip
import re
import zlib
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import BinaryIO

from ..config import InputOptions
from ..errors import ConfigError, InputDataError
from ..units import is_known_unit

#: Lines read for sniffing (header block of up to ~50 lines plus enough data rows).
SAMPLE_LINES = 200
_MAX_LINE_BYTES = 1 << 20

#: Cells read as missing values (not counted as bad cells). Common practice of loggers and
#: spreadsheet exports; ``#NV`` is the German-locale spelling of ``#N/A``.
MISSING_MARKERS = (
    "", "NaN", "nan", "NAN", "-nan", "-NaN", "---", "--", "-", "#N/A", "#NV", "N/A", "NA",
    "n/a", "null", "NULL", "None",
)
_MISSING = frozenset(MISSING_MARKERS)

_DELIMITERS = ("\t", ";", ",", "|")  # priority when several are consistent
_NUM_RE = re.compile(r"[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?")
_COMMA_DEC_RE = re.compile(r"[+-]?\d*,\d+(?:[eE][+-]?\d+)?")
_DOT_DEC_RE = re.compile(r"[+-]?\d*\.\d+(?:[eE][+-]?\d+)?")
#: ISO 8601 date-time (also with a space instead of "T"), optional fraction and UTC offset.
ISO_RE = re.compile(
    r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?\s*(?:Z|[+-]\d{2}(?::?\d{2})?)?"
)
#: An explicit UTC offset (or Z) at the end of an ISO 8601 time stamp.
ISO_OFFSET_RE = re.compile(r"(?:Z|[+-]\d{2}(?::?\d{2})?)$")
_KEY_VALUE_RE = re.compile(r"^\s*([^:=]{1,60}?)\s*[:=]\s*(.*?)\s*$")


@dataclass
class Layout:
    """The structure of a logger export, as found by :func:`sniff`.

    Line numbers are 0-based physical lines of the decoded text (what pandas ``skiprows``
    counts). ``names`` and ``units`` are the cells of the names and units rows; ``units`` is
    None when the file has no units row. ``sample_rows`` are the split data rows of the
    sample (for detecting the time format and for messages).
    """

    path: Path
    encoding: str
    compression: str | None
    delimiter: str
    decimal: str
    names: list[str]
    names_line: int
    units: list[str] | None
    units_line: int | None
    data_line: int
    n_fields: int
    metadata: dict[str, str] = field(default_factory=dict)
    sample_rows: list[list[str]] = field(default_factory=list)
    detected: dict[str, bool] = field(default_factory=dict)


def open_binary(path: Path) -> tuple[BinaryIO, str | None]:
    """Open ``path`` for binary reading, transparently gunzipping; returns (file, compression)."""
    with open(path, "rb") as fh:
        magic = fh.read(2)
    if magic == b"\x1f\x8b":
        return gzip.GzipFile(path, "rb"), "gzip"
    return open(path, "rb"), None


def _read_head(path: Path) -> tuple[bytes, bool, str | None]:
    """The first SAMPLE_LINES lines as bytes, whether that is the whole file, compression."""
    fh, compression = open_binary(path)
    chunks: list[bytes] = []
    try:
        with fh:
            for _ in range(SAMPLE_LINES):
                line = fh.readline(_MAX_LINE_BYTES)
                if not line:
                    break
                chunks.append(line)
            at_eof = fh.read(1) == b""
    except (OSError, EOFError, zlib.error) as exc:
        raise InputDataError(f"{path}: cannot read the compressed file ({exc}).") from None
    return b"".join(chunks), at_eof, compression


def _decode(head: bytes, path: Path, forced: str | None) -> tuple[str, str]:
    """Decode the sample; returns (text, encoding name for the full read)."""
    if forced:
        try:
            return head.decode(forced, errors="replace"), forced
        except LookupError:
            raise ConfigError(
                f"[input] encoding '{forced}' is not a known text encoding."
            ) from None
    if head.startswith(b"\xef\xbb\xbf"):
        return head[3:].decode("utf-8", errors="replace"), "utf-8-sig"
    if head.startswith((b"\xff\xfe", b"\xfe\xff")):
        even = head[: len(head) // 2 * 2]
        return even.decode("utf-16", errors="replace"), "utf-16"
    if b"\x00" in head:
        raise InputDataError(
            f"{path}: not a text file (it contains NUL bytes); dynoqc reads CSV/TSV text "
            "exports, optionally gzip-compressed."
        )
    for enc in ("utf-8", "cp1252"):
        try:
            return head.decode(enc), enc
        except UnicodeDecodeError:
            continue
    return head.decode("latin-1"), "latin-1"


def _split(line: str, delimiter: str) -> list[str]:
    """Cells of one line (CSV quoting honoured), stripped of surrounding blanks."""
    try:
        row = next(csv.reader([line], delimiter=delimiter, quotechar='"'))
    except (csv.Error, StopIteration):
        row = line.split(delimiter)
    return [c.strip() for c in row]


def _is_comment(line: str, delimiter: str | None) -> bool:
    s = line.lstrip()
    if s.startswith(("#", "//")):
        return True
    return delimiter != ";" and s.startswith(";")


def _is_number(cell: str) -> bool:
    return _NUM_RE.fullmatch(cell) is not None


def _is_value(cell: str) -> bool:
    return _is_number(cell) or ISO_RE.fullmatch(cell) is not None


def _is_data(cells: list[str], n_fields: int) -> bool:
    """A data row: the right field count and more numbers/time stamps than other text."""
    if len(cells) != n_fields:
        return False
    values = sum(1 for c in cells if _is_value(c))
    other = sum(1 for c in cells if c not in _MISSING and not _is_value(c))
    return values > 0 and values > other


def looks_like_units(cells: list[str]) -> bool:
    """True for a units row: most non-empty cells are known unit spellings, some not numeric."""
    filled = [c for c in cells if c]
    if not filled:
        return False
    known = [c for c in filled if is_known_unit(c)]
    textual = [c for c in known if not _is_number(c) and c not in _MISSING]
    return len(known) * 2 >= len(filled) and bool(textual)


def _sniff_delimiter(lines: list[str], path: Path) -> str:
    tail = [ln for ln in lines if ln.strip() and not _is_comment(ln, None)][-20:]
    if not tail:
        raise InputDataError(f"{path}: no data lines found (only comments or blank lines).")
    # A delimiter fits when the last lines (the data) split into the same number (>= 2) of
    # fields: at least 3 lines in a row, or all lines of a shorter sample. The very last line
    # may be cut short (a logger stopped mid-write).
    need = min(3, len(tail))
    for d in _DELIMITERS:
        counts = [len(_split(ln, d)) for ln in tail]
        for body in (counts, counts[:-1]):
            if not body or body[-1] < 2:
                continue
            run = len(body) - next(
                (k for k in range(len(body) - 1, -1, -1) if body[k] != body[-1]), -1
            ) - 1
            if run >= need:
                return d
    raise InputDataError(
        f"{path}: cannot tell the column delimiter (tried tab, ';', ',', '|'); "
        "set [input] delimiter in the config."
    )


def _sniff_decimal(rows: list[list[str]]) -> str:
    comma = dot = 0
    for cells in rows:
        for c in cells:
            if _COMMA_DEC_RE.fullmatch(c):
                comma += 1
            elif _DOT_DEC_RE.fullmatch(c):
                dot += 1
    return "," if comma > dot else "."


def _parse_metadata(line: str, delimiter: str) -> tuple[str, str] | None:
    """A ``key: value`` / ``key = value`` / ``key<delimiter>value`` pair, or None."""
    comment = _is_comment(line, delimiter)
    text = line.strip()
    if comment:
        text = re.sub(r"^(#+|//+|;+)\s*", "", text)
    candidates: list[tuple[str, str]] = []
    m = _KEY_VALUE_RE.match(text)
    split_delim = [delimiter, "\t"] if comment else [delimiter]
    by_delim: tuple[str, str] | None = None
    for d in dict.fromkeys(split_delim):
        if d in text:
            cells = [c for c in _split(text, d)]
            if len(cells) >= 2 and cells[0]:
                by_delim = (cells[0], " ".join(c for c in cells[1:] if c))
                break
    if m and (comment or by_delim is None):
        candidates.append((m.group(1), m.group(2)))
    if by_delim is not None:
        candidates.append(by_delim)
    for key, value in candidates:
        key = key.strip().strip('"').strip()
        value = value.strip().strip('"').strip()
        if key and value and len(key) <= 60:
            return key, value
    return None


def _first_data_line(path: Path, content: list[int], is_data: dict[int, bool]) -> int:
    """First data line: a data row followed by two more (tolerates odd rows further down)."""
    for k, i in enumerate(content):
        nxt = content[k : k + 3]
        if all(is_data[j] for j in nxt) and (len(nxt) == 3 or k + len(nxt) == len(content)):
            return i
    raise InputDataError(
        f"{path}: no data rows found below the header (a header without data, or a "
        "layout dynoqc cannot read)."
    )


def _header_lines(
    path: Path,
    split: dict[int, list[str]],
    content: list[int],
    data_line: int,
    units_row: bool | None,
) -> tuple[int, int | None, int]:
    """(data line, units line or None, names line): a units row just below the names or
    just above the data (``units_row`` from [input] forces or forbids it)."""
    before = [i for i in content if i < data_line]
    units_line: int | None = None
    if units_row is not False and looks_like_units(split[data_line]):
        units_line = data_line
        rest = [i for i in content if i > data_line]
        if not rest:
            raise InputDataError(f"{path}: no data rows below the units row (header only).")
        data_line = rest[0]
    if units_line is None and before:
        last = before[-1]
        if units_row or (units_row is None and looks_like_units(split[last])):
            units_line = last
            before = before[:-1]
    if not before:
        raise InputDataError(
            f"{path}: no names row found above the data (line {data_line + 1}); the first "
            "row before the data must name the columns."
        )
    return data_line, units_line, before[-1]


def sniff(path: Path, options: InputOptions) -> Layout:
    """Find the layout of a logger export from its first lines.

    ``options`` ([input] in the config) override detection: ``encoding``, ``delimiter``,
    ``decimal`` and ``units_row``. Raises InputDataError for an empty, binary, header-only
    or unreadable file.
    """
    path = Path(path)
    head, at_eof, compression = _read_head(path)
    if not head.strip():
        raise InputDataError(f"{path}: the file is empty.")
    text, encoding = _decode(head, path, options.encoding)
    controls = sum(1 for ch in text if ord(ch) < 32 and ch not in "\t\r\n\x0c")
    if controls > 0.01 * len(text):
        raise InputDataError(
            f"{path}: not a text file (binary content); dynoqc reads CSV/TSV text exports, "
            "optionally gzip-compressed."
        )
    lines = re.split(r"\r\n|\r|\n", text)
    if not at_eof or lines[-1] == "":
        lines = lines[:-1]  # partial last line of the sample, or the final newline
    detected: dict[str, bool] = {}

    if options.delimiter:
        delimiter = options.delimiter
    else:
        delimiter = _sniff_delimiter(lines, path)
        detected["delimiter"] = True

    # Content lines (not blank, not comments) by line number, split into cells.
    split = {
        i: _split(ln, delimiter)
        for i, ln in enumerate(lines)
        if ln.strip() and not _is_comment(ln, delimiter)
    }
    content = sorted(split)
    counts = [len(split[i]) for i in content][-20:]
    if not counts:
        raise InputDataError(f"{path}: no data lines found (only comments or blank lines).")
    n_fields = Counter(counts).most_common(1)[0][0]
    is_data = {i: _is_data(split[i], n_fields) for i in content}

    data_line = _first_data_line(path, content, is_data)
    data_line, units_line, names_line = _header_lines(
        path, split, content, data_line, options.units_row
    )
    names = split[names_line]
    units = split[units_line] if units_line is not None else None
    detected["units_row"] = options.units_row is None

    data_rows = [split[i] for i in content if i >= data_line and is_data[i]]
    if options.decimal:
        decimal = options.decimal
    elif delimiter == ",":
        decimal = "."
    else:
        decimal = _sniff_decimal(data_rows)
        detected["decimal"] = True
    if decimal == delimiter:
        raise ConfigError(
            f"[input] decimal and delimiter are both '{decimal}'; they must differ."
        )

    metadata: dict[str, str] = {}
    for ln in lines[:names_line]:
        if ln.strip():
            kv = _parse_metadata(ln, delimiter)
            if kv is not None:
                metadata.setdefault(kv[0], kv[1])

    return Layout(
        path=path,
        encoding=encoding,
        compression=compression,
        delimiter=delimiter,
        decimal=decimal,
        names=names,
        names_line=names_line,
        units=units,
        units_line=units_line,
        data_line=data_line,
        n_fields=n_fields,
        metadata=metadata,
        sample_rows=data_rows,
        detected=detected,
    )
