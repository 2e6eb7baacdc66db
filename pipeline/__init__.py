"""dynoqc: overnight engine test-cell data check (import package ``pipeline``).

For notebooks::

    import pipeline
    result = pipeline.process_run("night.csv.gz", "cell.toml")   # no files written
    res = pipeline.read_result("out/night.h5")                    # a written result, as pandas
"""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version
from typing import Any

try:
    __version__ = version("dynoqc")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0.0.0+unknown"

__all__ = ["__version__", "process_run", "process_to_files", "read_result"]


def __getattr__(name: str) -> Any:
    """Lazy access to the entry points, so ``import pipeline`` (and ``dynoqc --help``) stays
    light."""
    if name in ("process_run", "process_to_files"):
        from . import api

        return getattr(api, name)
    if name == "read_result":
        from .result import read_result

        return read_result
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
