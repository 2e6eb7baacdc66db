"""dynoqc: overnight engine test-cell data check (import package ``pipeline``).

For notebooks::

    import pipeline
    result = pipeline.process_run("night.csv.gz", "cell.toml")   # no files written
    res = pipeline.read_result("out/night.h5")                    # a written result, as pandas
"""

from __future__ import annotations

from typing import Any

#: The one place the version is written; pyproject.toml reads it from here (importing
#: importlib.metadata instead would cost every start of ``dynoqc`` about 40 ms).
__version__ = "0.1.0"

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
