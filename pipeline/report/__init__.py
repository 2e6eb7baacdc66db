"""Report stage: the only stage that writes files.

- :func:`write_result` (``hdf5.py``): the HDF5 result file of DESIGN.md "Result file (contract)".
- :func:`render_report` (``render.py``): figures and the night summary, rebuilt from a result
  file alone. One module per figure (``overview``, ``consistency``, ``residuals``,
  ``steady_table``, ``water``, ``fuel``, ``emissions``) on the shared helpers of ``plots.py``;
  the numbers behind them in ``reportdata.py``; the summary (Markdown, PDF, JSON) in
  ``summary.py``.

matplotlib is imported only when a plotting function is first used, so ``--no-plots`` runs and
``--help`` stay fast.
"""

from __future__ import annotations

from typing import Any

from .hdf5 import write_result
from .render import render_report

__all__ = ["envelope", "plot_lambda_overview", "render_report", "write_result"]


def __getattr__(name: str) -> Any:
    """Lazy access to the plotting functions (imports matplotlib on first use)."""
    if name == "envelope":
        from .plots import envelope

        return envelope
    if name == "plot_lambda_overview":
        from .overview import plot_lambda_overview

        return plot_lambda_overview
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
