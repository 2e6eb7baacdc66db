"""The console summary of a processed night (stdout of ``dynoqc process``)."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from .api import NightOutcome


def night_summary(outcome: NightOutcome) -> list[str]:
    """A few plain lines: what was written, the lambdas, the instrument verdicts, the flags."""
    res = outcome.result
    lines = [f"{outcome.run.name} -> {outcome.result_file}"]
    if res is None:
        return lines
    s = res.series
    t = s["time"].to_numpy()
    hours = (t[-1] - t[0]) / 3600.0 if len(t) > 1 else 0.0
    lines[0] += f"  ({len(s)} rows, {hours:.1f} h)"
    valid = s["valid"].to_numpy() > 0
    parts = []
    for name in ("lambda_flow", "lambda_carbon", "lambda_oxygen", "lambda_sensor"):
        if name in s:
            v = s[name].to_numpy()[valid]
            v = v[np.isfinite(v)]
            if v.size:
                parts.append(f"{name.removeprefix('lambda_')} {np.median(v):.3f}")
    if parts:
        lines.append(f"  median lambda on {int(valid.sum())} valid samples: " + ", ".join(parts))
    lines.extend(f"  {line}" for line in res.summary)
    if len(res.flags):
        counts = res.flags["check"].value_counts()
        lines.append("  flags: " + ", ".join(f"{n} {c}" for c, n in counts.items()))
    else:
        lines.append("  flags: none")
    for note in res.attrs.get("warnings", []):
        lines.append(f"  note: {note}")
    for path in outcome.figures:
        kind = {".png": "figure", ".csv": "table", ".xlsx": "table"}.get(path.suffix, "summary")
        lines.append(f"  {kind}: {path}")
    return lines
