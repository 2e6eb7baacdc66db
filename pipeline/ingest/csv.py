"""Phase two of reading a CSV/TSV logger export: the fast parse of the data block.

:func:`read_csv_run` sniffs the layout (:mod:`pipeline.ingest.sniff`), then parses only the
mapped columns with the pandas C engine (integer ``skiprows``, ``usecols``; measured the
fastest option on 2 cores, ECOSYSTEM.md section 2.2). Mapping, units, cell counts and the time
base are format-independent (:mod:`pipeline.ingest.table`).
"""

from __future__ import annotations

import warnings
from pathlib import Path

import pandas as pd

from ..config import Config
from ..data import RunData
from ..errors import InputDataError
from .sniff import MISSING_MARKERS, Layout, sniff
from .table import Source, build_run


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




def _show(delimiter: str) -> str:
    return "\\t" if delimiter == "\t" else delimiter


def csv_source(path: Path, layout: Layout) -> Source:
    """Describe a sniffed CSV/TSV file as a :class:`~pipeline.ingest.table.Source`."""
    detected = " (detected)" if layout.detected.get("decimal") else ""

    def load(positions: list[int], text_cols: set[int]) -> dict[int, pd.Series]:
        df = _parse(layout, positions, text_cols)
        return {p: df[p] for p in positions}

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
