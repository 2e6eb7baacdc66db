"""Render the report of a result file, from the file alone: figures and the night summary.

:func:`render_report` is the entry point of ``dynoqc process`` (after writing the .h5) and
``dynoqc report RESULT.h5``. Each figure lives in its own module with a ``NAME`` and a
``figure(res, out_dir, stem) -> list[Path]`` that raises
:class:`pipeline.report.plots.FigureSkipped` when the result lacks what it needs; a skipped
figure is listed with its reason in the summary, never drawn as an empty axes.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping, Sequence
from importlib import import_module
from pathlib import Path

import numpy as np

#: Figure modules in report order (``pipeline.report.<module>``).
FIGURE_MODULES = (
    "overview",
    "consistency",
    "residuals",
    "steady_table",
    "water",
    "fuel",
    "emissions",
)


def _draw(
    mod_names: Sequence[str], res: object, out_dir: Path, stem: str
) -> tuple[dict[str, list[Path]], dict[str, str], list[str]]:
    """Draw the figures ``mod_names``: ({module: paths}, {figure name: reason skipped},
    [warnings]). A broken figure becomes a skip with a warning, never costs the others."""
    from .plots import FigureSkipped

    written: dict[str, list[Path]] = {}
    skipped: dict[str, str] = {}
    notes: list[str] = []
    for mod_name in mod_names:
        mod = import_module(f"{__package__}.{mod_name}")
        try:
            written[mod_name] = list(mod.figure(res, out_dir, stem))
        except FigureSkipped as exc:
            skipped[mod.NAME] = str(exc)
        except OSError:  # the disk or the folder, not the figure: an error of the run
            raise
        except Exception as exc:  # one broken figure must not cost the others and the summary
            notes.append(f"figure {mod.NAME!r} failed: {exc!r}")
            skipped[mod.NAME] = f"could not be drawn (internal error: {exc}); please report it"
    return written, skipped, notes


def render_figures(res: object, out_dir: Path, stem: str) -> tuple[list[Path], dict[str, str]]:
    """Every figure that can be made: (paths written, {figure name: reason skipped}), in the
    order of :data:`FIGURE_MODULES`, drawn one after the other in this process."""
    written, skipped, notes = _draw(FIGURE_MODULES, res, out_dir, stem)
    for note in notes:
        warnings.warn(note, RuntimeWarning, stacklevel=2)
    paths = [p for m in FIGURE_MODULES for p in written.get(m, [])]
    order = {import_module(f"{__package__}.{m}").NAME: i for i, m in enumerate(FIGURE_MODULES)}
    return paths, dict(sorted(skipped.items(), key=lambda kv: order.get(kv[0], 99)))


def render_report(
    result_path: str | Path,
    out_dir: str | Path,
    *,
    plots: bool = True,
    series: Mapping[str, np.ndarray] | None = None,
) -> list[Path]:
    """Write the report outputs of ``result_path`` into ``out_dir``; return their paths.

    Always the summary as Markdown and JSON (``<stem>_summary.md``, ``.json``); with
    ``plots`` also the figures ``<stem>_<figure>.png`` (see :data:`FIGURE_MODULES`) and the
    one-page PDF summary (``<stem>_summary.pdf``); both need matplotlib, which ``plots=False``
    never imports. Figures first, then the summary, which lists the figures written and
    skipped. ``series``: the time series of the file already in memory (see
    :func:`pipeline.result.read_result`); the report is the same, only faster.
    """
    from ..result import read_result
    from .summary import build_summary, write_json, write_markdown

    result_path = Path(result_path)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    res = read_result(result_path, series=series)
    stem = result_path.stem
    figures: list[Path] = []
    skipped: dict[str, str] = {}
    if plots:
        figures, skipped = render_figures(res, out_dir, stem)
    from .point_table import write_point_tables

    tables = write_point_tables(res, out_dir, stem)
    summary = build_summary(res, figures, skipped)
    outputs = list(figures) + tables
    outputs.append(write_markdown(summary, out_dir / f"{stem}_summary.md"))
    if plots:
        from .summary import write_pdf

        outputs.append(write_pdf(summary, out_dir / f"{stem}_summary.pdf"))
    # The JSON summary is written last and lists every output: a night whose JSON names
    # files that all exist is complete (the rerun check of pipeline.batch).
    json_path = out_dir / f"{stem}_summary.json"
    summary["outputs"] = [result_path.name, *(p.name for p in outputs), json_path.name]
    summary["plots"] = bool(plots)
    outputs.append(write_json(summary, json_path))
    return outputs
