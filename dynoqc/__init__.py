"""dynoqc's Python API under its own name: ``import dynoqc``.

The implementation lives in the ``pipeline`` package; this module re-exports its public names
(``dynoqc.process_run``, ``dynoqc.read_result``, ``dynoqc.plot_water``, ...), so a user's own
``pipeline.py`` cannot shadow the API.
"""

from __future__ import annotations

from typing import Any

import pipeline as _pipeline

__version__ = _pipeline.__version__
__all__ = list(_pipeline.__all__)


def __getattr__(name: str) -> Any:
    if name in _pipeline.__all__:
        return getattr(_pipeline, name)
    raise AttributeError(f"module 'dynoqc' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(__all__)
