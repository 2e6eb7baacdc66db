"""dynoqc: overnight engine test-cell data check (import package ``pipeline``).

For notebooks::

    import pipeline
    result = pipeline.process_run("night.csv.gz", "cell.toml")   # no files written
    res = pipeline.read_result("out/night.h5")                    # a written result, as pandas
    fig = pipeline.plot_water(result)                             # a Figure, from memory too
"""

from __future__ import annotations

from typing import Any

#: The one place the version is written; pyproject.toml reads it from here (importing
#: importlib.metadata instead would cost every start of ``dynoqc`` about 40 ms).
__version__ = "0.1.0"

#: Public name -> module that defines it (imported on first use).
_PUBLIC = {
    "process_run": "api",
    "process_to_files": "api",
    "read_result": "result",
    "result_in_memory": "result",
    "ResultFile": "result",
    "ProcessResult": "data",
    "render_report": "report.render",
    "plot_lambda_overview": "report.overview",
    "plot_consistency": "report.consistency",
    "plot_residuals": "report.residuals",
    "plot_steady_table": "report.steady_table",
    "plot_water": "report.water",
    "plot_fuel": "report.fuel",
    "plot_emissions": "report.emissions",
}

__all__ = ["__version__", *_PUBLIC]


def __getattr__(name: str) -> Any:
    """Lazy access to the public names, so ``import pipeline`` (and ``dynoqc --help``) stays
    light (matplotlib is imported only by the first plot)."""
    if name in _PUBLIC:
        from importlib import import_module

        return getattr(import_module(f".{_PUBLIC[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(__all__)
