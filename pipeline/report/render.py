"""Render the figures (and later the summary) of a result file, from the file alone."""

from __future__ import annotations

from pathlib import Path


def render_report(
    result_path: str | Path, out_dir: str | Path, *, plots: bool = True
) -> list[Path]:
    """Write the report outputs of ``result_path`` into ``out_dir``; return their paths."""
    from ..result import read_result

    result_path = Path(result_path)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    res = read_result(result_path)
    outputs: list[Path] = []
    if plots:
        from .plots import plot_lambda_overview

        outputs.append(plot_lambda_overview(res, out_dir / f"{result_path.stem}_lambda.png"))
    return outputs
