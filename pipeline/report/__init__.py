"""Report stage: the only stage that writes files.

- :func:`write_result` (``hdf5.py``): the HDF5 result file of DESIGN.md "Result file (contract)".
- :func:`plot_lambda_overview` (``plots.py``): report figures, built from a read-back
  :class:`pipeline.result.ResultFile` only.

matplotlib is imported only when a plotting function is first used, so ``--no-plots`` runs and
``--help`` stay fast.
"""

from __future__ import annotations

from typing import Any

from .hdf5 import write_result
from .render import render_report

__all__ = ["envelope", "plot_lambda_overview", "render_report", "write_result"]

_PLOTS = {"envelope", "plot_lambda_overview"}


def __getattr__(name: str) -> Any:
    """Lazy access to the plotting functions (imports matplotlib on first use)."""
    if name in _PLOTS:
        from . import plots

        return getattr(plots, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
