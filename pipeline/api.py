"""The driver: one function per use, whose body is the list of stages.

- :func:`process_run` returns a :class:`~pipeline.data.ProcessResult` without writing files
  (for notebooks and tests).
- :func:`process_to_files` is what ``dynoqc process`` does for one night: the result file
  ``OUT/<run stem>.h5`` and the PNG figures beside it.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from . import __version__
from .balance import compute_balance
from .balance.driftcor import apply_drift_correction
from .balance.tables import emissions_table
from .checks import instrument_verdicts, run_checks
from .checks.alignment import align_analyzers
from .checks.intervals import make_clock
from .config import Config, load_config
from .data import FLAG_COLUMNS, ProcessResult, RunData, columns_frame, make_flags
from .ingest import read_run
from .intervals import gap_flags
from .quantities import DERIVED, GASES, INPUTS

#: Flag checks that make an instrument's verdict (others, e.g. data_gap, are only listed).
VERDICT_CHECKS = ("drift", "lambda_disagreement", "out_of_range", "condensation_risk")


def run_stem(path: Path) -> str:
    """The run's file name without its data suffixes (``night.csv.gz`` -> ``night``)."""
    name = path.name
    for suffix in (".gz", ".csv", ".tsv", ".txt", ".parquet", ".mf4", ".mdf"):
        if name.lower().endswith(suffix):
            name = name[: -len(suffix)]
    return name or path.stem


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


def _sorted_flags(parts: list[pd.DataFrame]) -> pd.DataFrame:
    parts = [p for p in parts if len(p)]
    if not parts:
        return make_flags([])
    flags = pd.concat(parts, ignore_index=True)[list(FLAG_COLUMNS)]
    return flags.sort_values(["start_s", "check"], kind="stable").reset_index(drop=True)


def _verdict_lines(verdicts: list[tuple[str, str]]) -> list[str]:
    """One console line per instrument: its canonical name and the verdict."""
    width = max((len(name) for name, _ in verdicts), default=0)
    return [f"{name:<{width}}  {verdict}" for name, verdict in verdicts]


def _emission_results(
    frame: pd.DataFrame,
    cfg: Config,
    series: pd.DataFrame,
    tables: dict[str, pd.DataFrame],
    delay_s: float,
) -> list[str]:
    """Add the ``emissions`` table (per steady point and night) and, when zero/span
    references are configured, the 40 CFR 1065.672 drift-corrected series and the
    ``drift_correction`` table; return notes for the console. ``series`` and ``tables`` are
    extended in place."""
    # Drift correction: correct the analyzer readings, recompute, compare (1065.550).
    corrected_frame, readings, notes = apply_drift_correction(frame, cfg)
    corrected = None
    if corrected_frame is not None:
        corrected = compute_balance(corrected_frame, cfg, analyzer_delay_s=delay_s).derived
        tables["drift_correction"] = readings
        for g in cfg.drift_correction.gases:
            series[f"{g}_driftcor"] = corrected_frame[g].to_numpy()
        for name in ("co2_mass_flow", "co_mass_flow", "nox_mass_flow", "thc_mass_flow"):
            if name in corrected:
                series[f"{name}_driftcor"] = corrected[name].to_numpy()
    steady = tables.get("steady_points")
    intervals = (
        [(f"SP{i + 1:02d}", float(a), float(b))
         for i, (a, b) in enumerate(zip(steady["start_s"], steady["end_s"], strict=True))]
        if steady is not None and len(steady) else []
    )
    if "co2_mass_flow" in series or "nox_mass_flow" in series:
        tables["emissions"] = emissions_table(
            series, intervals, cfg.fuel, cfg.verification, corrected
        )
    return notes


def _provenance(cfg: Config, run: RunData, notes: list[str]) -> dict[str, Any]:
    """Root attributes of the result file: tool, source file, config, fuel, input notes."""
    meta = run.meta
    attrs: dict[str, Any] = {
        "title": f"dynoqc result: {cfg.run_name}",
        "tool_name": "dynoqc",
        "tool_version": __version__,
        "created_utc": datetime.now(UTC).isoformat(timespec="seconds").replace("+00:00", "Z"),
        "source_file": meta.source.name,
        "source_sha256": meta.sha256,
        "config_file": cfg.path.name,
        "config_toml": cfg.to_toml(),
        "config_sha256": cfg.sha256(),
        "run_name": cfg.run_name,
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
    run_path: str | Path,
    config: str | Path | Config,
    *,
    progress: Callable[[str], None] = _noop,
) -> ProcessResult:
    """Process one logged night: ingest -> align -> balance -> checks. No files are written.

    ``progress`` is called with each stage name of :data:`STAGES` as it starts.
    """
    run_path = Path(run_path)
    cfg = config if isinstance(config, Config) else load_config(config)

    progress("reading")
    run = read_run(run_path, cfg)  # ingest
    progress("aligning")
    gas_columns = [g for g in GASES if g in run.frame]
    settings = dict(cfg.checks)
    frame, alignment = align_analyzers(
        run.frame, gas_columns, settings, cfg.sampling.analyzer_delay_s
    )
    delay = float(alignment.get("analyzer_delay_s", 0.0))
    progress("balance")
    bal = compute_balance(frame, cfg, analyzer_delay_s=delay)  # balance
    progress("checks")
    checked = run_checks(  # checks
        frame,
        bal.derived,
        {**settings, "ranges": {n: c.range for n, c in cfg.channels.items() if c.range}},
        has_sensor="lambda_sensor" in frame,
        start_time=run.meta.start_time,
    )

    # Gaps are found in the data as logged (before the analyzer shift), so a dropout of the
    # whole logger is one flag and the shifted tail is not mistaken for one.
    logged = run.frame
    essential = [c for c in ("fuel_mass_flow", "air_mass_flow", *gas_columns) if c in logged]
    gaps = make_flags(
        gap_flags(logged["time"].to_numpy(), {c: logged[c].to_numpy() for c in essential})
    )
    progress("results")
    series = _join_columns(frame, bal.derived, checked.series)
    tables = dict(checked.tables)
    notes = run.meta.warnings + bal.warnings
    notes += _emission_results(frame, cfg, series, tables, delay)  # derived results, 1065.672

    series_attrs = _series_attrs(cfg, run)
    series_attrs.update(checked.series_attrs)
    for name in series.columns:
        base = name.removesuffix("_driftcor")
        if base != name and base in series_attrs:
            series_attrs[name] = {
                **series_attrs[base],
                "long_name": f"{series_attrs[base]['long_name']}, drift-corrected "
                "(40 CFR 1065.672)",
            }
    flags = _sorted_flags([bal.flags, gaps, checked.flags])
    # Verdicts over every instrument check (the checks stage's and the balance's, e.g. the
    # sample line's condensation risk); data gaps are listed as flags, not verdicts.
    verdicts = instrument_verdicts(
        flags[flags["check"].isin(VERDICT_CHECKS)],
        [name for name, _ in checked.verdicts],
        make_clock(run.meta.start_time),
    )
    attrs = _provenance(cfg, run, notes)
    attrs.update(
        balance=dict(bal.attrs),
        checks_settings=dict(checked.attrs),
        instrument_verdicts=dict(verdicts),
    )
    return ProcessResult(
        series=series,
        series_attrs=series_attrs,
        flags=flags,
        tables=tables,
        group_attrs={"alignment": alignment},
        attrs=attrs,
        summary=_verdict_lines(verdicts),
    )


@dataclass
class NightOutcome:
    """What ``dynoqc process`` reports for one night."""

    run: Path
    result_file: Path
    figures: list[Path] = field(default_factory=list)
    result: ProcessResult | None = None


def process_to_files(
    run_path: str | Path,
    config: str | Path | Config,
    out_dir: str | Path,
    *,
    plots: bool = True,
    progress: Callable[[str], None] = _noop,
) -> NightOutcome:
    """Process one night and write ``OUT/<run stem>.h5`` (atomically), its figures and its
    summary; ``progress`` is called with each stage name of :data:`STAGES`."""
    from .report import render_report
    from .report.hdf5 import stored_series, write_result

    run_path = Path(run_path)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    result = process_run(run_path, config, progress=progress)
    progress("writing")
    h5 = write_result(out_dir / f"{run_stem(run_path)}.h5", result)
    progress("report")
    # Figures and summary are rebuilt from the result file alone (its time series taken from
    # memory, where they are exactly the values just written).
    outputs = render_report(h5, out_dir, plots=plots, series=stored_series(result))
    return NightOutcome(run=run_path, result_file=h5, figures=outputs, result=result)
