"""Read Apache Parquet logger exports (pyarrow, a core dependency).

Units come from the config, or from the Parquet field metadata (key ``unit`` or ``units``)
when the config leaves a channel's unit implicit, or from a name such as ``speed [rpm]``.
Schema-level key/value metadata (other than pandas' and Arrow's own) becomes the run's
metadata, so a ``start_time`` entry sets the absolute start. A timestamp-typed time column
gives the start time directly (naive time stamps are read in ``[input] timezone``).
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from ..config import Config
from ..errors import InputDataError
from ..records import RunData
from .table import Source, build_run

#: Schema metadata keys written by pandas/Arrow themselves (not the logger's metadata).
_OWN_KEYS = {b"pandas", b"ARROW:schema", b"org.apache.spark.version"}


def _decode(b: bytes) -> str:
    return b.decode("utf-8", errors="replace").strip()


def _field_unit(f: pa.Field) -> str | None:
    md = f.metadata or {}
    for key in (b"unit", b"units", b"Unit", b"Units"):
        if key in md:
            return _decode(md[key])
    return None


def parquet_source(path: Path) -> Source:
    """Describe a Parquet file as a :class:`~pipeline.ingest.table.Source`."""
    try:
        pf = pq.ParquetFile(path)
    except (pa.ArrowInvalid, pa.ArrowIOError, OSError) as exc:
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputDataError(f"{path}: not a readable Parquet file ({msg}).") from None
    schema = pf.schema_arrow
    names = [str(n) for n in schema.names]
    units = [_field_unit(schema.field(i)) for i in range(len(names))]
    metadata: dict[str, str] = {}
    for k, v in (schema.metadata or {}).items():
        if k in _OWN_KEYS:
            continue
        key, value = _decode(k), _decode(v)
        if key.lower() in ("units", "unit"):
            try:  # a JSON object {column: unit} at file level
                table_units = json.loads(value)
            except ValueError:
                table_units = None
            if isinstance(table_units, dict):
                for i, n in enumerate(names):
                    if units[i] is None and isinstance(table_units.get(n), str):
                        units[i] = table_units[n]
                continue
        metadata[key] = value

    def load(positions: list[int], text_cols: set[int]) -> dict[int, pd.Series]:
        cols = [names[p] for p in positions]
        try:
            table = pf.read(columns=list(dict.fromkeys(cols)), use_threads=True)
        except (pa.ArrowInvalid, pa.ArrowIOError, OSError) as exc:
            raise InputDataError(f"{path}: cannot read the Parquet data ({exc}).") from None
        out: dict[int, pd.Series] = {}
        for p, name in zip(positions, cols, strict=True):
            col = table.column(name)
            if pa.types.is_dictionary(col.type):
                col = col.cast(col.type.value_type)
            if pa.types.is_decimal(col.type):  # exact decimals (e.g. decimal128) as float64
                col = col.cast(pa.float64())
            out[p] = pd.Series(col.to_pandas(), name=name).reset_index(drop=True)
        return out

    return Source(
        path=path,
        kind="Parquet",
        names=names,
        file_units=units,
        header="the Parquet schema",
        load=load,
        metadata=metadata,
        rows_note=" in the Parquet file",
    )


def read_parquet_run(path: Path, config: Config) -> RunData:
    """Read a Parquet logger export into canonical units (contract of ``read_run``)."""
    return build_run(parquet_source(Path(path)), config)
