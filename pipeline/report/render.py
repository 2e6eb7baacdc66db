"""Render the report of a result file, from the file alone: figures and the night summary.

:func:`render_report` is the entry point of ``dynoqc process`` (after writing the .h5) and
``dynoqc report RESULT.h5``. Each figure lives in its own module with a ``NAME`` and a
``figure(res, out_dir, stem) -> list[Path]`` that raises
:class:`pipeline.report.plots.FigureSkipped` when the result lacks what it needs; a skipped
figure is listed with its reason in the summary, never drawn as an empty axes.
"""

from __future__ import annotations

import os
import sys
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


#: Processes that draw the figures of one night: None = two on Linux where this process may
#: run on two or more CPUs, else one (macOS and Windows: forking a process that has loaded
#: system frameworks or has no fork at all is not safe there). ``--jobs``/``--scheduler``
#: workers use one (their CPUs are shared out between nights already).
FIGURE_PROCESSES: int | None = None

#: The figures a second process draws (about half of the drawing time; the rest are drawn
#: here meanwhile).
SECOND_PROCESS_FIGURES = ("overview", "steady_table", "emissions")


def figure_processes() -> int:
    """Processes :func:`render_figures` will use (see :data:`FIGURE_PROCESSES`)."""
    if FIGURE_PROCESSES is not None:
        return max(1, int(FIGURE_PROCESSES))
    if not sys.platform.startswith("linux") or not hasattr(os, "fork"):
        return 1
    cpus = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    return 2 if (cpus or 1) >= 2 else 1


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
        except Exception as exc:  # one broken figure must not cost the others and the summary
            notes.append(f"figure {mod.NAME!r} failed: {exc!r}")
            skipped[mod.NAME] = f"could not be drawn (internal error: {exc}); please report it"
    return written, skipped, notes


class _ChildDrawing:
    """A forked process drawing some figures (see :func:`_draw_in_child`)."""

    def __init__(self, pid: int, read_fd: int) -> None:
        self.pid, self.read_fd = pid, read_fd

    def abort(self) -> None:
        """Interrupt the child (it removes its temporary files) and wait for it."""
        import signal

        try:
            os.close(self.read_fd)
        except OSError:
            pass
        try:
            os.kill(self.pid, signal.SIGINT)
            os.waitpid(self.pid, 0)
        except (ProcessLookupError, ChildProcessError):
            pass

    def wait(self) -> tuple[dict[str, list[Path]], dict[str, str], list[str]] | None:
        """The child's outcome once it has finished; None when it died without one."""
        import json

        try:
            with os.fdopen(self.read_fd, "rb") as fh:
                data = fh.read()
            _, status = os.waitpid(self.pid, 0)
        except BaseException:
            self.abort()
            raise
        if status != 0 or not data:
            return None
        out = json.loads(data)
        written = {k: [Path(p) for p in v] for k, v in out["written"].items()}
        return written, dict(out["skipped"]), list(out["notes"])


def _draw_in_child(
    mod_names: Sequence[str], res: object, out_dir: Path, stem: str
) -> _ChildDrawing:
    """Fork a process that draws ``mod_names``.

    The child shares the parent's memory copy-on-write (the result is not copied or
    pickled), writes its figures atomically like the parent, sends back only the outcome as
    JSON through a pipe, and leaves with ``os._exit`` (no atexit handlers, no buffers
    flushed twice). Interrupted (Ctrl-C reaches the whole process group, or the parent passes
    its interrupt on), it removes its temporary files and exits.
    """
    import json

    read_fd, write_fd = os.pipe()
    pid = os.fork()
    if pid == 0:  # the child
        code = 1
        try:
            os.close(read_fd)
            written, skipped, notes = _draw(mod_names, res, out_dir, stem)
            payload = {"written": {k: [str(p) for p in v] for k, v in written.items()},
                       "skipped": skipped, "notes": notes}
            with os.fdopen(write_fd, "wb") as fh:
                fh.write(json.dumps(payload).encode("utf-8"))
            code = 0
        except BaseException:  # noqa: BLE001 - the parent redraws what is missing
            pass
        finally:
            os._exit(code)
    os.close(write_fd)
    return _ChildDrawing(pid, read_fd)


def render_figures(res: object, out_dir: Path, stem: str) -> tuple[list[Path], dict[str, str]]:
    """Every figure that can be made: (paths written, {figure name: reason skipped}), in the
    order of :data:`FIGURE_MODULES`.

    With two processes (:func:`figure_processes`), a forked child draws
    :data:`SECOND_PROCESS_FIGURES` while this process draws the others; the figures are the
    same, byte for byte. Should the child fail, its figures are drawn here after all.
    """
    second = [m for m in FIGURE_MODULES if m in SECOND_PROCESS_FIGURES]
    first = [m for m in FIGURE_MODULES if m not in second]
    if figure_processes() >= 2 and second and first:
        from . import reportdata as rd

        # Data several figures share, computed once before the fork so both processes have it
        # (a result that lacks them is met again, and reported, by the figures themselves).
        try:
            rd.steady_point_stats(res)
            rd.steady_blocks(res)
        except Exception:  # noqa: BLE001
            pass
        child = _draw_in_child(second, res, out_dir, stem)
        try:
            written, skipped, notes = _draw(first, res, out_dir, stem)
        except BaseException:  # e.g. Ctrl-C sent to this process only
            child.abort()
            raise
        outcome = child.wait()
        if outcome is None:
            outcome = _draw(second, res, out_dir, stem)
        written.update(outcome[0])
        skipped.update(outcome[1])
        notes += outcome[2]
    else:
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
    summary = build_summary(res, figures, skipped)
    outputs = list(figures)
    outputs.append(write_markdown(summary, out_dir / f"{stem}_summary.md"))
    if plots:
        from .summary import write_pdf

        outputs.append(write_pdf(summary, out_dir / f"{stem}_summary.pdf"))
    outputs.append(write_json(summary, out_dir / f"{stem}_summary.json"))
    return outputs
