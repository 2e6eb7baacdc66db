"""Phase two of reading a CSV/TSV logger export: the fast parse of the data block.

:func:`read_csv_run` sniffs the layout (:mod:`pipeline.ingest.sniff`), then parses only the
mapped columns. A clean file goes through pyarrow's multi-threaded CSV reader with typed
float64 columns (about 5x faster than pandas on a 12 h, 10 Hz night); a file that pyarrow
refuses (a cell that is not a number, a short or long row, an unusual encoding) is parsed by
the pandas C engine (integer ``skiprows``, ``usecols``), which keeps every cell as text where
needed so bad cells are counted, never lost. Both give the same values. Mapping, units, cell
counts and the time base are format-independent (:mod:`pipeline.ingest.table`).
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from ..config import Config
from ..errors import InputDataError
from ..records import RunData
from .sniff import MISSING_MARKERS, Layout, sniff
from .table import Source, build_run

#: Encodings the pyarrow fast path reads natively (others go through pandas).
_ARROW_ENCODINGS = ("utf-8", "utf_8", "utf8", "utf-8-sig", "ascii")


def _parse_arrow(
    layout: Layout, positions: list[int], text_cols: set[int]
) -> dict[int, pd.Series] | None:
    """The fast path: pyarrow with typed columns; None when the file needs the careful path.

    Lines are counted as physical lines (blank ones included) for ``skip_rows``, as the
    sniffer counts them; blank data lines are skipped as pandas does.
    """
    if layout.encoding.lower() not in _ARROW_ENCODINGS or layout.compression not in (
        None, "gzip"
    ):
        return None
    import pyarrow as pa
    import pyarrow.csv as pacsv

    names = [f"c{i}" for i in range(layout.n_fields)]
    types = {names[p]: pa.string() if p in text_cols else pa.float64() for p in positions}
    try:
        source = (
            pa.input_stream(str(layout.path), compression="gzip")
            if layout.compression == "gzip"
            else str(layout.path)
        )
        table = pacsv.read_csv(
            source,
            read_options=pacsv.ReadOptions(
                skip_rows=layout.data_line, column_names=names, block_size=16 << 20
            ),
            parse_options=pacsv.ParseOptions(delimiter=layout.delimiter),
            convert_options=pacsv.ConvertOptions(
                column_types=types,
                include_columns=[names[p] for p in positions],
                null_values=list(MISSING_MARKERS),
                strings_can_be_null=True,
                quoted_strings_can_be_null=True,
                decimal_point=layout.decimal,
            ),
        )
    except (pa.ArrowException, OSError, EOFError, ValueError):
        return None  # the careful path reads it and says exactly what is wrong
    out = {}
    for p in positions:
        col = table.column(names[p])
        out[p] = (
            col.to_pandas().astype(object) if p in text_cols
            else pd.Series(col.to_numpy(zero_copy_only=False).astype(np.float64, copy=False))
        )
    # The columns are NumPy copies now; hand the parser's buffers back to the system (Arrow's
    # allocator keeps them otherwise: about 100 MB for a 12 h / 10 Hz night).
    table = col = None
    pa.default_memory_pool().release_unused()
    return out


def _parse(layout: Layout, positions: list[int], text_cols: set[int]) -> dict[int, pd.Series]:
    """Read the mapped columns of the data block (all rows): the pyarrow fast path when the
    file is clean, else the pandas C engine."""
    fast = _parse_arrow(layout, positions, text_cols)
    if fast is not None:
        return fast
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
    return {p: df[p] for p in positions}




def _show(delimiter: str) -> str:
    return "\\t" if delimiter == "\t" else delimiter


def csv_source(path: Path, layout: Layout) -> Source:
    """Describe a sniffed CSV/TSV file as a :class:`~pipeline.ingest.table.Source`."""
    detected = " (detected)" if layout.detected.get("decimal") else ""

    def load(positions: list[int], text_cols: set[int]) -> dict[int, pd.Series]:
        return _parse(layout, positions, text_cols)

    def time_cells(pos: int) -> list[str]:
        return [r[pos] for r in layout.sample_rows if pos < len(r) and r[pos]]

    units: list[str | None] = list(layout.units) if layout.units is not None else []
    return Source(
        path=path,
        kind="CSV",
        names=list(layout.names),
        file_units=units,
        header=f"the names row (line {layout.names_line + 1})",
        load=load,
        metadata=dict(layout.metadata),
        time_cells=time_cells,
        read_hint=(
            f"The file was read with delimiter '{_show(layout.delimiter)}' and decimal "
            f"'{layout.decimal}'{detected}; check [input] delimiter/decimal"
        ),
        decimal=layout.decimal,
        rows_note=" below the header",
    )


def read_csv_run(path: Path, config: Config) -> RunData:
    """Read a CSV/TSV logger export (optionally gzip-compressed) into canonical units.

    See :func:`pipeline.ingest.read_run` for the contract. The input file is only read.
    """
    path = Path(path)
    layout = sniff(path, config.input)
    return build_run(csv_source(path, layout), config)
