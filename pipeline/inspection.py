"""``dynoqc inspect``: what is in a logged file, and how a config maps it (or could).

:func:`inspect_run` lists every column with its unit, value range and counts of missing and
unreadable cells. With a config it shows each mapped quantity (column, unit used, status),
the columns left unmapped and what ``dynoqc process`` would say on reading the file. Without a
config it proposes a ``[channels]`` table by matching column names and units
(:func:`propose_channels`), which ``--write FILE`` saves as a config to complete.
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .config import REQUIRED_CHANNELS, Config, InputOptions, load_config
from .errors import ConfigError, DynoqcError
from .fuels import load_presets
from .ingest import open_source
from .ingest.sniff import ISO_RE
from .ingest.table import Source, _Column, build_run, find_column, split_name_unit
from .quantities import INPUTS
from .units import dimension, unit_dimensions


@dataclass
class ColumnInfo:
    """What one file column holds."""

    name: str
    unit: str | None
    kind: str  # "number", "timestamp", "text", "empty"
    count: int
    missing: int
    bad: int
    minimum: float | None = None
    maximum: float | None = None
    first: str | None = None
    last: str | None = None
    bad_example: str | None = None
    increasing: bool = False

    def as_dict(self) -> dict[str, Any]:
        """Plain data for JSON."""
        return {k: v for k, v in self.__dict__.items()}


@dataclass
class Proposal:
    """One proposed ``[channels.<quantity>]`` entry, with notes on what to check."""

    quantity: str
    column: str
    unit: str
    basis: str | None = None
    carbon_number: float | None = None
    checks: list[str] = field(default_factory=list)
    score: float = 0.0

    def as_dict(self) -> dict[str, Any]:
        """Plain data for JSON."""
        d: dict[str, Any] = {"column": self.column, "unit": self.unit}
        if self.basis:
            d["basis"] = self.basis
        if self.carbon_number is not None:
            d["carbon_number"] = self.carbon_number
        if self.checks:
            d["check"] = list(self.checks)
        return d


# Name tokens per quantity: (token patterns, weight). A pattern matches a whole token, or a
# token made of the pattern and a known suffix (``co2dry``, ``noxppm``). Our own choice of
# the common English abbreviations of the trade.
_PATTERNS: dict[str, list[tuple[str, float]]] = {
    "time": [("time", 3), ("t", 2), ("timestamp", 3), ("elapsed", 2), ("datetime", 3),
             ("sec", 1), ("zeit", 3), ("uhrzeit", 3), ("datum", 2), ("date", 2)],
    "speed": [("speed", 3), ("rpm", 3), ("n", 2), ("revs", 2), ("enginespeed", 3),
              ("drehzahl", 4), ("engspd", 3)],
    "torque": [("torque", 3), ("trq", 3), ("tq", 2), ("enginetorque", 3),
               ("drehmoment", 4), ("moment", 3), ("md", 2)],
    "fuel_mass_flow": [("fuel", 3), ("fuelflow", 3), ("mfuel", 3), ("fuelrate", 3),
                       ("kraftstoff", 4), ("verbrauch", 3), ("kvs", 3), ("be", 1)],
    "air_mass_flow": [("air", 2), ("maf", 3), ("airflow", 3), ("mair", 3), ("intake", 1),
                      ("luft", 3), ("luftmasse", 4), ("ml", 2), ("scfm", 2)],
    "co2": [("co2", 4)],
    "co": [("co", 4)],
    "o2": [("o2", 4)],
    "nox": [("nox", 4)],
    "no": [("no", 3)],
    "no2": [("no2", 4)],
    "thc": [("thc", 4), ("hc", 3), ("fid", 2)],
    "h2": [("h2", 4)],
    "lambda_sensor": [("lambda", 4), ("lam", 3), ("uego", 3), ("wb", 1), ("widerange", 2)],
    "ambient_temperature": [("temp", 2), ("temperature", 2), ("ambient", 2), ("amb", 2),
                            ("cell", 1), ("air", 1), ("intake", 1), ("tamb", 3)],
    "ambient_pressure": [("baro", 4), ("barometer", 4), ("press", 2), ("pressure", 2),
                         ("ambient", 2), ("amb", 2), ("pamb", 3), ("cell", 1),
                         ("luftdruck", 4), ("umgebung", 2)],
    "ambient_humidity": [("rh", 4), ("humidity", 3), ("humid", 3), ("hum", 2),
                         ("feuchte", 3), ("luftfeuchte", 4), ("rf", 2)],
    "intake_humidity": [("humidity", 2), ("humid", 2), ("abshum", 3), ("moisture", 2)],
    "exhaust_pressure": [("exhaust", 2), ("exh", 2), ("press", 1), ("pressure", 1),
                         ("pexh", 3), ("abgas", 2), ("abgasdruck", 4)],
    "sample_line_temperature": [("line", 2), ("sample", 2), ("heated", 1), ("temp", 1),
                                ("leitung", 3)],
    "analyzer_mode": [("mode", 3), ("status", 3), ("state", 2), ("bench", 2),
                      ("analyzer", 1), ("zustand", 3), ("betrieb", 2)],
}

# Tokens that rule a quantity out (the name says it is something else).
_EXCLUDE: dict[str, set[str]] = {
    "ambient_temperature": {"oil", "water", "coolant", "exhaust", "exh", "line", "sample",
                            "fuel", "egt", "dew"},
    "ambient_pressure": {"exhaust", "exh", "oil", "fuel", "boost", "intake", "manifold",
                         "line", "sample", "rail"},
    "exhaust_pressure": {"oil", "fuel", "boost", "rail", "baro"},
    "air_mass_flow": {"temp", "temperature", "rh", "humidity", "press", "pressure", "fuel"},
    "fuel_mass_flow": {"temp", "temperature", "press", "pressure", "density"},
    "speed": {"fan", "turbo", "wind"},
}

_SUFFIXES = ("dry", "wet", "hot", "raw", "ppm", "pct", "meas", "conc", "flow", "rate", "act",
             "avg", "mean", "sensor", "tr", "feucht", "ist")
#: Name tokens of a wet (hot, undried) and a dry (after a chiller) sample: a heated FID or
#: heated NOx analyzer sees the wet sample (common practice), German "feucht"/"trocken".
_WET_TOKENS = {"wet", "hot", "heated", "hfid", "raw", "feucht", "nass", "hcld"}
_DRY_TOKENS = {"dry", "dried", "chilled", "cold", "trocken", "tr", "kalt"}


def tokens(name: str) -> list[str]:
    """Lower-case tokens of a column name: split at non-letters/digits and at camelCase."""
    bare = split_name_unit(name)[0]
    spaced = re.sub(r"(?<=[a-z])(?=[A-Z])", " ", bare)
    parts = [p.lower() for p in re.split(r"[^0-9A-Za-z]+", spaced) if p]
    whole = re.sub(r"[^0-9a-z]+", "", bare.lower())
    out = list(dict.fromkeys(parts + ([whole] if whole and whole not in parts else [])))
    return out


def _token_score(pattern: str, toks: list[str]) -> bool:
    for t in toks:
        if t == pattern:
            return True
        if t.startswith(pattern) and t[len(pattern):] in _SUFFIXES:
            return True
    return False


def _unit_fits(unit: str | None, quantity: str) -> bool | None:
    """True/False when the file gives a unit that fits / does not fit; None when no unit."""
    if unit is None or unit.strip() in ("", "-") and dimension(quantity) not in ("ratio", "code"):
        return None if (unit or "").strip() == "" else _unit_fits_known(unit, quantity)
    return _unit_fits_known(unit, quantity)


def _unit_fits_known(unit: str, quantity: str) -> bool:
    dims = unit_dimensions(unit)
    dim = dimension(quantity)
    if dim in dims:
        return True
    return quantity == "fuel_mass_flow" and "volume_flow" in dims


def _score(quantity: str, info: ColumnInfo) -> float:
    toks = tokens(info.name)
    if quantity in _EXCLUDE and any(t in _EXCLUDE[quantity] for t in toks):
        return 0.0
    name_score = sum(w for pat, w in _PATTERNS[quantity] if _token_score(pat, toks))
    if name_score == 0:
        return 0.0
    fits = _unit_fits(info.unit, quantity)
    if fits is False:
        return 0.0
    if quantity == "time":
        if info.kind == "timestamp":
            return name_score + 3
        if info.kind != "number":
            return 0.0
    elif info.kind not in ("number", "empty"):
        return 0.0
    return name_score + (2.0 if fits else 0.0)


def propose_channels(columns: list[ColumnInfo]) -> dict[str, Proposal]:
    """Proposed ``[channels]`` entries: the best-scoring column per quantity, each column used
    once (greedy by score, ties to the earlier column)."""
    cands: list[tuple[float, int, str]] = []
    for i, info in enumerate(columns):
        for q in _PATTERNS:
            s = _score(q, info)
            if s > 0:
                cands.append((s, i, q))
    cands.sort(key=lambda c: (-c[0], c[1], list(_PATTERNS).index(c[2])))
    used_cols: set[int] = set()
    out: dict[str, Proposal] = {}
    for s, i, q in cands:
        if i in used_cols or q in out:
            continue
        if q == "intake_humidity" and "ambient_humidity" in out:
            continue
        if q == "ambient_humidity" and "intake_humidity" in out:
            continue
        info = columns[i]
        out[q] = _proposal(q, info, s)
        used_cols.add(i)
    if "time" not in out:
        # No name says time: the first free column of time stamps, else of increasing numbers.
        for i, info in enumerate(columns):
            if i in used_cols:
                continue
            if info.kind == "timestamp" or (info.kind == "number" and info.increasing):
                out["time"] = _proposal("time", info, 1.0)
                break
    return {q: out[q] for q in INPUTS if q in out}


def guess_unit(q: str, info: ColumnInfo) -> str:
    """A unit for a column whose file gives none: a unit spelled in the name (``NOx_ppm``),
    else one that fits the magnitude of the values (common practice of logger set-ups),
    else the canonical unit. Always a guess, marked ``# check``."""
    dim = dimension(q)
    for t in split_name_unit(info.name)[0].replace("-", "_").split("_")[1:]:
        spelled = {"pct": "%", "percent": "%"}.get(t.lower(), t)
        if spelled and _unit_fits_known(spelled, q):
            return spelled
    top = max(abs(info.minimum or 0.0), abs(info.maximum or 0.0))
    if info.kind != "number":
        return INPUTS[q].unit
    if dim == "fraction":
        if q in ("co2", "o2"):
            return "mol/mol" if top <= 1.5 else "%"
        return "ppmC" if q == "thc" else "ppm"
    if dim == "pressure":
        return "bar" if top < 20 else "kPa" if top < 300 else "hPa" if top < 3000 else "Pa"
    if dim == "temperature":
        return "K" if top > 200 else "degC"
    if dim == "relative_humidity":
        return "1" if top <= 1.5 else "%"
    return INPUTS[q].unit


def _proposal(q: str, info: ColumnInfo, score: float) -> Proposal:
    toks = set(tokens(info.name))
    checks: list[str] = []
    fits = _unit_fits(info.unit, q)
    if fits:
        unit = str(info.unit)
    else:
        unit = INPUTS[q].unit
        if q == "time" and info.kind == "timestamp":
            unit = "s"
        elif dimension(q) not in ("ratio", "code"):
            unit = guess_unit(q, info)
            checks.append(f"unit: the file gives none; {unit} assumed")
    if q == "time" and not set(tokens(info.name)) & {"time", "t", "timestamp", "datetime"}:
        checks.append("column: chosen by its content (increasing values or time stamps)")
    p = Proposal(q, info.name, unit, checks=checks, score=score)
    if INPUTS[q].needs_basis:
        if toks & _DRY_TOKENS:
            p.basis = "dry"
        elif toks & _WET_TOKENS:
            p.basis = "wet"
        elif q == "air_mass_flow":
            p.basis = "wet"
            checks.append("basis: wet is the usual case (the meter sees humid air)")
        elif q == "thc":
            p.basis = "wet"  # a FID is heated and measures the hot, undried sample
            checks.append("basis: wet, as for a heated FID; dry only behind a chiller")
        else:
            p.basis = "dry"
            checks.append("basis: the name does not say dry or wet")
    if q == "exhaust_pressure" and info.maximum is not None and unit in ("kPa", "kpa"):
        if info.maximum < 50.0:  # an absolute exhaust pressure is never below ~50 kPa
            checks.append("gauge pressure? readings below 50 kPa cannot be absolute; use "
                          "unit = \"kPag\" (the ambient pressure is then added)")
    if q == "thc":
        p.carbon_number = 1.0
        if not re.fullmatch(r"(?i)ppmc1?", (info.unit or "").strip()):
            checks.append("carbon_number: 1 for ppmC, 3 propane-, 6 hexane-equivalent")
    return p


def _column_info(name: str, unit: str | None, raw: pd.Series, decimal: str) -> ColumnInfo:
    n = len(raw)
    if pd.api.types.is_datetime64_any_dtype(raw.dtype):
        ok = raw.dropna()
        return ColumnInfo(name, unit, "timestamp", n, n - len(ok), 0,
                          first=str(ok.iloc[0]) if len(ok) else None,
                          last=str(ok.iloc[-1]) if len(ok) else None)
    if not pd.api.types.is_numeric_dtype(raw.dtype):
        text = raw.dropna().astype(str).str.strip()
        head = text.head(50).tolist()
        if head and sum(1 for c in head if ISO_RE.fullmatch(c)) * 2 > len(head):
            return ColumnInfo(name, unit, "timestamp", n, n - len(text), 0,
                              first=text.iloc[0], last=text.iloc[-1])
    c = _Column(raw, decimal)
    v = c.values
    finite = np.isfinite(v)
    if not finite.any():
        kind = "text" if c.n_bad else "empty"
        return ColumnInfo(name, unit, kind, n, c.n_missing, c.n_bad,
                          bad_example=c.bad_example or None)
    fv = v[finite]
    return ColumnInfo(
        name, unit, "number", n, c.n_missing, c.n_bad,
        minimum=float(np.min(fv)), maximum=float(np.max(fv)),
        bad_example=c.bad_example or None,
        increasing=bool(fv.size > 2 and np.mean(np.diff(fv) > 0) > 0.99),
    )


def describe_columns(src: Source) -> list[ColumnInfo]:
    """Every column of the file with its unit, kind, range and cell counts."""
    positions = list(range(len(src.names)))
    raw = src.load(positions, set())
    out = []
    for p in positions:
        name = src.names[p]
        unit = split_name_unit(name)[1]
        if unit is None and p < len(src.file_units):
            unit = src.file_units[p]
        out.append(_column_info(name, unit, raw[p], src.decimal))
    return out


def _fmt(x: float | None) -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    return f"{x:.6g}"


def _columns_table(cols: list[ColumnInfo]) -> list[str]:
    w = max([len(c.name) for c in cols] + [6])
    uw = max([len(c.unit or "") for c in cols] + [4])
    lines = [f"  {'column':<{w}}  {'unit':<{uw}}  {'min':>12}  {'max':>12}  {'missing':>8}  "
             f"{'bad':>6}"]
    for c in cols:
        if c.kind == "timestamp":
            rng = f"{c.first} .. {c.last}"
            lines.append(f"  {c.name:<{w}}  {(c.unit or ''):<{uw}}  {rng:>26}  {c.missing:>8}  "
                         f"{c.bad:>6}")
            continue
        extra = f"  e.g. '{c.bad_example}'" if c.bad_example else ""
        if c.kind in ("text", "empty"):
            extra = f"  ({'no numbers' if c.kind == 'text' else 'empty'}){extra}"
        lines.append(
            f"  {c.name:<{w}}  {(c.unit or ''):<{uw}}  {_fmt(c.minimum):>12}  "
            f"{_fmt(c.maximum):>12}  {c.missing:>8}  {c.bad:>6}{extra}"
        )
    return lines


def proposal_toml(proposals: dict[str, Proposal], src: Source) -> str:
    """A config to complete: ``[fuel]`` (from the file's metadata if it names a preset) and
    the proposed ``[channels]`` tables; guesses carry a ``# check`` comment."""
    now = datetime.now(UTC).isoformat(timespec="seconds").replace("+00:00", "Z")
    lines = [
        f"# dynoqc config proposed by `dynoqc inspect` from {src.path.name} ({now}).",
        "# Lines marked '# check' are guesses: confirm them before use.",
        "",
    ]
    presets = load_presets()
    fuel = None
    for key, value in src.metadata.items():
        if "fuel" in key.lower():
            for tok in re.split(r"[^0-9A-Za-z_]+", value):
                if tok in presets:
                    fuel = tok
                    break
        if fuel:
            break
    lines.append("[fuel]")
    if fuel:
        lines.append(f'preset = "{fuel}"  # check: from the file\'s metadata')
    else:
        lines.append(f'# preset = "..."  # set the fuel: one of {", ".join(presets)}')
    lines.append("")
    for q, p in proposals.items():
        lines.append(f"[channels.{q}]")
        note = "  # check" if any(c.startswith("column") for c in p.checks) else ""
        lines.append(f"column = {json.dumps(p.column, ensure_ascii=False)}{note}")
        note = "  # check" if any(c.startswith("unit") for c in p.checks) else ""
        lines.append(f"unit = {json.dumps(p.unit, ensure_ascii=False)}{note}")
        if p.basis:
            note = "  # check" if any(c.startswith("basis") for c in p.checks) else ""
            lines.append(f'basis = "{p.basis}"{note}')
        if p.carbon_number is not None:
            note = ("  # check: 3 for propane-, 6 for hexane-equivalent"
                    if any(c.startswith("carbon") for c in p.checks) else "")
            lines.append(f"carbon_number = {p.carbon_number:g}{note}")
        lines.append("")
    for q in REQUIRED_CHANNELS:
        if q not in proposals:
            lines.append(f"# [channels.{q}]  # required, not found: add column and unit")
    return "\n".join(lines).rstrip() + "\n"


def _mapping(config: Config, src: Source, cols: list[ColumnInfo]) -> tuple[
        list[dict[str, Any]], list[str]]:
    """Per mapped quantity: column, unit used, status; and the unmapped columns."""
    rows: list[dict[str, Any]] = []
    used: set[int] = set()
    for q, ch in config.channels.items():
        row: dict[str, Any] = {"quantity": q, "column": ch.column, "config_unit": ch.unit}
        if ch.column is None:
            row.update(value=ch.value, status="constant value")
            rows.append(row)
            continue
        idx = find_column(ch.column, src.names)
        if idx is None and q == "time" and src.fallback_time is not None:
            idx = src.fallback_time
        if idx is None:
            row["status"] = "MISSING: not a column of the file"
            rows.append(row)
            continue
        used.add(idx)
        info = cols[idx]
        row["file_unit"] = info.unit
        status = "ok"
        if info.kind in ("text", "empty") and q != "time":
            status = f"NO NUMBERS ({info.kind})"
        elif info.unit and _unit_fits(info.unit, q) is False:
            status = f"file unit '{info.unit}' does not fit {q}; config unit used"
        row["status"] = status
        row["min"], row["max"] = info.minimum, info.maximum
        rows.append(row)
    unmapped = [c.name for i, c in enumerate(cols) if i not in used]
    return rows, unmapped


def _write_new(path: Path, text: str) -> None:
    """Write ``text`` to a file that must not exist yet (never overwritten)."""
    try:
        with open(path, "x", encoding="utf-8") as fh:
            fh.write(text)
    except FileExistsError:
        raise ConfigError(f"{path}: the file exists and was not overwritten.") from None
    except OSError as exc:
        raise ConfigError(f"{path}: cannot write ({exc.strerror}).") from None


def _trial_read(src: Source, config: Config) -> dict[str, Any]:
    """What reading the file with ``config`` gives: rows, bad cells and notes, or the error."""
    try:
        rd = build_run(src, config)
    except DynoqcError as exc:
        return {"error": str(exc), "exit_code": exc.exit_code}
    return {
        "rows_read": rd.meta.rows_read, "rows_dropped": rd.meta.rows_dropped,
        "bad_cells": rd.meta.bad_cells, "warnings": rd.meta.warnings,
    }


def inspect_run(
    run: Path, config_path: Path | None, as_json: bool, write_path: Path | None
) -> list[str]:
    """Lines to print for ``dynoqc inspect`` (see the module docstring).

    Raises ConfigError (exit 2) for a bad config, ``--write`` together with ``--config``, or
    a ``--write`` target that exists (never overwritten); InputDataError (exit 3) for a file
    that cannot be read at all. Problems of the mapping (a missing column) are shown, not
    raised.
    """
    run = Path(run)
    if write_path is not None and config_path is not None:
        raise ConfigError("--write saves a proposed config; use it without --config.")
    if write_path is not None and Path(write_path).exists():
        raise ConfigError(
            f"{write_path}: the file exists and was not overwritten; choose another name or "
            "remove it first."
        )
    config = load_config(config_path) if config_path is not None else None
    options = config.input if config is not None else InputOptions()
    with open_source(run, options) as src:
        cols = describe_columns(src)
        n_rows = cols[0].count if cols else 0
        doc: dict[str, Any] = {
            "file": str(run),
            "format": src.kind,
            "rows": n_rows,
            "metadata": dict(src.metadata),
            "columns": [c.as_dict() for c in cols],
        }
        if src.start_time is not None:
            doc["start_time_utc"] = src.start_time.isoformat()
        lines: list[str] = []
        if config is not None:
            mapping, unmapped = _mapping(config, src, cols)
            doc["config"] = str(config_path)
            doc["mapping"] = mapping
            doc["unmapped"] = unmapped
            doc["process"] = _trial_read(src, config)
        else:
            proposals = propose_channels(cols)
            toml_text = proposal_toml(proposals, src)
            doc["proposal"] = {q: p.as_dict() for q, p in proposals.items()}
            doc["proposal_toml"] = toml_text
            doc["not_found"] = [q for q in REQUIRED_CHANNELS if q not in proposals]
            if write_path is not None:
                _write_new(Path(write_path), toml_text)
                doc["written"] = str(write_path)
    if as_json:
        return [json.dumps(doc, indent=2, ensure_ascii=False, default=str)]

    lines.append(f"{run}: {src.kind}, {n_rows} rows, {len(cols)} columns")
    if src.start_time is not None:
        lines.append(f"  start time: {src.start_time.isoformat()}")
    for k, v in src.metadata.items():
        lines.append(f"  {k}: {v}")
    lines.append("")
    lines.extend(_columns_table(cols))
    lines.append("")
    if config is not None:
        lines.append(f"Mapping by {config_path}:")
        qw = max(len(r["quantity"]) for r in doc["mapping"])
        for r in doc["mapping"]:
            col = r["column"] if r["column"] is not None else f"value {r.get('value')}"
            lines.append(f"  {r['quantity']:<{qw}}  <- {col!s:<20} [{r['config_unit']}]  "
                         f"{r['status']}")
        lines.append("  unmapped columns: " + (", ".join(doc["unmapped"]) or "none"))
        proc = doc["process"]
        lines.append("")
        if "error" in proc:
            lines.append(f"dynoqc process would stop (exit {proc['exit_code']}): {proc['error']}")
        else:
            lines.append(
                f"dynoqc process would read {proc['rows_read']} rows, drop "
                f"{proc['rows_dropped']}, with {sum(proc['bad_cells'].values())} bad cell(s)."
            )
            lines.extend(f"  note: {w}" for w in proc["warnings"])
    else:
        lines.append("Proposed config (no --config given; check the lines marked '# check'):")
        lines.append("")
        lines.extend(doc["proposal_toml"].rstrip("\n").splitlines())
        if doc["not_found"]:
            lines.append("")
            lines.append("Not found: " + ", ".join(doc["not_found"]) + " (required).")
        if write_path is not None:
            lines.append("")
            lines.append(f"Written to {write_path}; complete it, then run dynoqc process "
                         f"{run} --config {write_path}.")
        else:
            lines.append("")
            lines.append("Save it with --write FILE.")
    return lines
