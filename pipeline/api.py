"""The driver: one function per use, whose body is the list of stages.

- :func:`process_run` returns a :class:`~pipeline.records.ProcessResult` without writing files
  (for notebooks and tests).
- :func:`process_to_files` is what ``dynoqc process`` does for one night: the result file
  ``OUT/<run stem>.h5`` and the PNG figures beside it.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from . import __version__
from .align import Alignment, align
from .balance import (
    IMPOSSIBLE_O2_PLUS_CO2,
    BalanceResult,
    DriftCorrected,
    compute_balance,
    drift_corrected,
)
from .balance.tables import emissions_table
from .checks import CheckSettings, ChecksResult, run_checks
from .checks.verdicts import console_lines
from .config import Config, load_config
from .ingest import read_joined, read_run
from .quantities import DERIVED, GASES, INPUTS
from .records import ProcessResult, RunData, RunMeta, columns_frame
from .states import BENCH_STATE_ATTRS, ENGINE_STATE_ATTRS, bench_state, engine_state, running


def run_stem(path: Path) -> str:
    """The run's file name without its data suffixes (``night.csv.gz`` -> ``night``)."""
    name = path.name
    for suffix in (".gz", ".csv", ".tsv", ".txt", ".parquet", ".mf4", ".mdf"):
        if name.lower().endswith(suffix):
            name = name[: -len(suffix)]
    return name or path.stem


def _safe_stem(name: str) -> str:
    """A night name usable as a file name (path separators and odd characters as ``_``)."""
    import re

    return re.sub(r"[^\w.\-]+", "_", name).strip("._") or "night"


def night_name(cfg: Config, meta: RunMeta) -> str:
    """The night's name in titles and file names: the file's own name; for joined rollover
    files ``[run] name`` when the config gives one, else the first file's name."""
    if "joined_files" in meta.metadata and cfg.run_name != cfg.path.stem:
        return cfg.run_name
    return run_stem(meta.source)


def _series_attrs(config: Config, run: RunData) -> dict[str, dict[str, Any]]:
    attrs: dict[str, dict[str, Any]] = {}
    for name in run.frame.columns:
        q = INPUTS[name]
        a: dict[str, Any] = {"units": q.unit, "long_name": q.long_name}
        ch = config.channels.get(name)
        if ch is not None:
            if ch.basis:
                a["basis"] = ch.basis
            if ch.column is not None:
                a["source_column"] = run.meta.columns_in.get(name, ch.column)
            else:
                a["source_value"] = float(ch.value) if ch.value is not None else np.nan
            a["source_unit"] = run.meta.units_in.get(name, ch.unit)
            if name == "thc":
                a["source_carbon_number"] = ch.carbon_number
        if name in GASES:
            a["time_aligned"] = 1
        attrs[name] = a
    for name, q in DERIVED.items():
        attrs[name] = {"units": q.unit, "long_name": q.long_name}
    return attrs


def _emissions(
    series: pd.DataFrame, steady: pd.DataFrame, cfg: Config, corrected: DriftCorrected | None
) -> pd.DataFrame | None:
    """The ``emissions`` table per steady point and for the night (1065.650 / 1065.672)."""
    if "co2_mass_flow" not in series and "nox_mass_flow" not in series:
        return None
    intervals = [
        (f"SP{i + 1:02d}", float(a), float(b))
        for i, (a, b) in enumerate(zip(steady["start_s"], steady["end_s"], strict=True))
    ]
    return emissions_table(
        series, intervals, cfg.fuel, cfg.verification,
        corrected.derived if corrected is not None else None,
    )


def _provenance(cfg: Config, run: RunData, notes: list[str]) -> dict[str, Any]:
    """Root attributes of the result file: tool, source file, config, fuel, input notes."""
    meta = run.meta
    name = night_name(cfg, meta)
    attrs: dict[str, Any] = {
        "title": f"dynoqc result: {name}",
        "tool_name": "dynoqc",
        "tool_version": __version__,
        "created_utc": datetime.now(UTC).isoformat(timespec="seconds").replace("+00:00", "Z"),
        "source_file": meta.source.name,
        "source_sha256": meta.sha256,
        "config_file": cfg.path.name,
        "config_toml": cfg.to_toml(),
        "config_sha256": cfg.sha256(),
        "run_name": name,
        "config_run_name": cfg.run_name,
        "run_description": cfg.description,
        "fuel": cfg.fuel.properties(),
        "fuel_name": cfg.fuel.name,
        "rows_read": meta.rows_read,
        "rows_dropped": meta.rows_dropped,
        "bad_cells": dict(meta.bad_cells),
        "missing_cells": dict(meta.missing_cells),
        "warnings": notes,
        "input_metadata": dict(meta.metadata),
    }
    if meta.start_time is not None:
        attrs["start_time_utc"] = (
            meta.start_time.astimezone(UTC).isoformat().replace("+00:00", "Z")
        )
    return attrs


def _join_columns(*parts: pd.DataFrame | Mapping[str, Any]) -> pd.DataFrame:
    """The columns of ``parts`` side by side, without copying them (:func:`columns_frame`)."""
    columns: dict[str, Any] = {}
    for part in parts:
        items = (
            ((str(c), part[c].to_numpy()) for c in part.columns)
            if isinstance(part, pd.DataFrame)
            else part.items()
        )
        for name, values in items:
            if name in columns:
                raise ValueError(f"series {name!r} is produced by two stages")
            columns[name] = values
    return columns_frame(columns)


#: Stage names reported to a progress callback, in order (process_to_files adds the last two).
STAGES = ("reading", "aligning", "balance", "checks", "results", "writing", "report")


def _noop(stage: str) -> None:
    """Default progress callback."""


def process_run(
    run_path: str | Path | Sequence[str | Path],
    config: str | Path | Config,
    *,
    progress: Callable[[str], None] = _noop,
) -> ProcessResult:
    """Process one logged night: ingest -> align -> balance -> checks. No files are written.

    ``run_path``: the night's file, or the rollover files of one night (joined in the order
    of their clocks, :func:`pipeline.ingest.read_joined`). ``progress`` is called with each
    stage name of :data:`STAGES` as it starts.
    """
    cfg = config if isinstance(config, Config) else load_config(config)
    settings = CheckSettings.from_config(cfg)
    progress("reading")
    paths = [Path(p) for p in ([run_path] if isinstance(run_path, str | Path) else run_path)]
    run = read_run(paths[0], cfg) if len(paths) == 1 else read_joined(paths, cfg)
    state = engine_state(run.frame, settings)
    progress("aligning")
    frame, alignment = align(run.frame, settings)
    progress("balance")
    bal = compute_balance(frame, cfg, analyzer_delay_s=alignment.delay_s,
                          engine_running=running(state))
    corrected = drift_corrected(frame, cfg, analyzer_delay_s=alignment.delay_s,
                                engine_running=running(state))
    progress("checks")
    checked = run_checks(
        frame, bal.derived, settings, has_sensor="lambda_sensor" in frame,
        start_time=run.meta.start_time, logged=run.frame, sampling_state=bal.sampling_state,
        engine_state=state, update_rows=run.meta.update_rows,
        sensitivity={"o2": bal.attrs.get("o2_lambda_sensitivity", float("nan"))},
    )
    progress("results")
    return _assemble(cfg, run, frame, state, alignment, bal, corrected, checked)


def _assemble(
    cfg: Config,
    run: RunData,
    frame: pd.DataFrame,
    state: np.ndarray,
    alignment: Alignment,
    bal: BalanceResult,
    corrected: DriftCorrected | None,
    checked: ChecksResult,
) -> ProcessResult:
    """The stages' outputs as one result: series side by side with their attributes, the
    tables, provenance and the console lines of the verdicts."""
    bench = bench_state(frame, bal.sampling_state, cfg.drift_correction.zero_mode,
                        cfg.drift_correction.span_mode, IMPOSSIBLE_O2_PLUS_CO2)
    series = _join_columns(
        frame, bal.derived, {"engine_state": state, "bench_state": bench}, checked.series,
        corrected.series if corrected else {},
    )
    tables = dict(checked.tables)
    if corrected is not None:
        tables["drift_correction"] = corrected.readings
    emissions = _emissions(series, checked.tables["steady_points"], cfg, corrected)
    if emissions is not None:
        tables["emissions"] = emissions
    series_attrs = _series_attrs(cfg, run)
    series_attrs.update(checked.series_attrs)
    series_attrs["engine_state"] = dict(ENGINE_STATE_ATTRS)
    series_attrs["bench_state"] = dict(BENCH_STATE_ATTRS)
    for name in series.columns:
        base = name.removesuffix("_driftcor")
        if base != name and base in series_attrs:
            series_attrs[name] = {
                **series_attrs[base],
                "long_name": f"{series_attrs[base]['long_name']}, drift-corrected "
                "(40 CFR 1065.672)",
            }
    notes = run.meta.warnings + bal.warnings + (corrected.notes if corrected else [])
    attrs = _provenance(cfg, run, notes)
    attrs.update(
        balance=dict(bal.attrs),
        checks_settings=dict(checked.attrs),
        instrument_verdicts={v.instrument: v.line for v in checked.verdicts},
    )
    return ProcessResult(
        series=series,
        series_attrs=series_attrs,
        flags=checked.flags,
        tables=tables,
        group_attrs={"alignment": alignment.attrs},
        attrs=attrs,
        summary=console_lines(checked.verdicts),
    )


@dataclass
class NightOutcome:
    """What ``dynoqc process`` reports for one night."""

    run: Path
    result_file: Path
    figures: list[Path] = field(default_factory=list)
    result: ProcessResult | None = None


def process_to_files(
    run_path: str | Path | Sequence[str | Path],
    config: str | Path | Config,
    out_dir: str | Path,
    *,
    plots: bool = True,
    progress: Callable[[str], None] = _noop,
    write_threads: int | None = None,
) -> NightOutcome:
    """Process one night and write ``OUT/<run stem>.h5`` (atomically), its figures and its
    summary; ``progress`` is called with each stage name of :data:`STAGES`;
    ``write_threads``: see :func:`pipeline.report.hdf5.write_result`."""
    from .report import render_report
    from .report.hdf5 import stored_series, write_result

    joined = not isinstance(run_path, str | Path)
    paths = [Path(p) for p in run_path] if joined else [Path(run_path)]  # type: ignore[union-attr]
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    result = process_run(paths if joined else paths[0], config, progress=progress)
    progress("writing")
    stem = _safe_stem(str(result.attrs["run_name"])) if joined else run_stem(paths[0])
    h5 = write_result(out_dir / f"{stem}.h5", result, threads=write_threads)
    progress("report")
    # Figures and summary are rebuilt from the result file alone (its time series taken from
    # memory, where they are exactly the values just written).
    outputs = render_report(h5, out_dir, plots=plots, series=stored_series(result))
    return NightOutcome(run=paths[0], result_file=h5, figures=outputs, result=result)
