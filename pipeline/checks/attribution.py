"""Which instrument moved: fit single-instrument hypotheses to the pattern of residual shifts.

Each lambda estimate leans on different instruments (DESIGN.md "Lambda estimates"):

- ``lambda_carbon`` on the CO2 (and CO, THC) analyzers; a CO2 error also moves
  ``lambda_oxygen`` a little, because the Brettschneider equation uses CO2 too. For lean
  exhaust with CO, HC and NO negligible it reduces to lambda = 1 + O2 / ((1 + H/4) CO2), so
  d ln(lambda_oxygen) / d ln(CO2) = 1/lambda - 1, while the carbon balance gives about -1:
  the oxygen estimate moves by (lambda - 1)/lambda times the carbon estimate's move [D]
  (derivation from REFERENCES 2; zero at lambda 1, 0.375 at lambda 1.6).
- ``lambda_oxygen`` on the O2 analyzer alone;
- ``lambda_flow`` on the air and fuel meters (which lambda cannot tell apart);
- ``lambda_sensor`` on the sensor.

A residual r_ab = lambda_a/lambda_b - 1 moves by about e_a - e_b when the estimates move by
relative amounts e. For each hypothesis H (a unit vector of estimate moves) the amplitude is
fitted by noise-weighted least squares to the observed residual shifts; the hypothesis with
the smallest weighted residual sum of squares wins, and the fraction of the pattern it explains
says how sure the attribution is. The three exhaust/flow hypotheses point 120 degrees apart in
the plane of (r_carbon_flow, r_oxygen_flow), so the relative size of the moves, not only which
moved, decides.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..instruments import RESIDUAL_PAIRS, label


def hypotheses(lambda_typical: float) -> dict[str, dict[str, float]]:
    """Relative move of each estimate per unit fault, per suspect (see module docstring)."""
    eps = max(0.0, 1.0 - 1.0 / lambda_typical) if np.isfinite(lambda_typical) else 0.0
    return {
        "co2": {"carbon": 1.0, "oxygen": eps},
        "o2": {"oxygen": 1.0},
        "air_mass_flow|fuel_mass_flow": {"flow": 1.0},
        "lambda_sensor": {"sensor": 1.0},
    }


@dataclass
class Attribution:
    """Result of :func:`attribute`.

    suspect: canonical channel name(s), ``|``-separated; amount: fitted relative move of the
    suspect's estimate (e.g. +0.04 = lambda_carbon 4 % high); explained: fraction of the
    weighted pattern explained (0..1); ranking: (suspect, weighted SSE) best first;
    shifts: the observed residual shifts used.
    """

    suspect: str
    amount: float
    explained: float
    ranking: list[tuple[str, float]]
    shifts: dict[str, float]


def attribute(
    shifts: dict[str, float],
    noise: dict[str, float],
    lambda_typical: float,
    min_explained: float,
) -> Attribution:
    """Name the suspect instrument from residual shifts (fractions) and their noise scales."""
    names = [n for n, v in shifts.items() if n in RESIDUAL_PAIRS and np.isfinite(v)]
    d = np.array([shifts[n] for n in names])
    w = np.array([1.0 / max(noise.get(n, 1.0), 1e-9) for n in names])
    estimates_present = {e for n in names for e in RESIDUAL_PAIRS[n]}
    results: list[tuple[str, float, float]] = []
    for suspect, moves in hypotheses(lambda_typical).items():
        if not set(moves) & estimates_present:
            continue
        v = np.array(
            [
                moves.get(RESIDUAL_PAIRS[n][0], 0.0) - moves.get(RESIDUAL_PAIRS[n][1], 0.0)
                for n in names
            ]
        )
        vw, dw = v * w, d * w
        vv = float(vw @ vw)
        if vv == 0.0:
            continue
        a = float(vw @ dw) / vv
        sse = float(np.sum((dw - a * vw) ** 2))
        results.append((suspect, a, sse))
    total = float(np.sum((d * w) ** 2))
    if not results or total == 0.0:
        return Attribution("", 0.0, 0.0, [], dict(zip(names, d.tolist(), strict=True)))
    results.sort(key=lambda r: r[2])
    best = results[0]
    explained = 1.0 - best[2] / total
    suspect = best[0]
    if explained < min_explained and len(results) > 1:
        suspect = f"{best[0]}|{results[1][0]}"
    return Attribution(
        suspect=suspect,
        amount=best[1],
        explained=float(explained),
        ranking=[(r[0], r[2]) for r in results],
        shifts=dict(zip(names, d.tolist(), strict=True)),
    )


def describe(att: Attribution) -> str:
    """One sentence: which estimate moved, by how much, and what that means for the instrument."""
    if not att.suspect:
        return "no instrument could be singled out."
    best = att.ranking[0][0]
    pct = 100.0 * att.amount
    sure = (
        ""
        if "|" not in att.suspect.replace("air_mass_flow|fuel_mass_flow", "")
        else (
            f" (pattern unclear: only {100 * att.explained:.0f} % explained; "
            f"also consistent with the {label(att.ranking[1][0])})"
        )
    )
    moved = ", ".join(
        f"{n.removeprefix('residual_')} {100 * v:+.1f} %" for n, v in att.shifts.items()
    )
    if best == "co2":
        err = 100 * abs(att.amount) / (1 + att.amount)
        what = (
            f"lambda_carbon moved {pct:+.1f} % against the other estimates, "
            f"so the {label('co2')} reads about {err:.1f} % "
            f"{'low' if att.amount > 0 else 'high'}"
        )
    elif best == "o2":
        what = (
            f"lambda_oxygen moved {pct:+.1f} % against the other estimates, "
            f"so the {label('o2')} reads {'high' if att.amount > 0 else 'low'}"
        )
    elif best == "air_mass_flow|fuel_mass_flow":
        what = (
            f"lambda_flow moved {pct:+.1f} % against the exhaust estimates, so the air meter "
            f"reads {'high' if att.amount > 0 else 'low'} or the fuel meter reads "
            f"{'low' if att.amount > 0 else 'high'} (lambda cannot tell which)"
        )
    else:
        what = (
            f"lambda_sensor moved {pct:+.1f} % against the other estimates, "
            f"so the sensor reads {'lean' if att.amount > 0 else 'rich'}"
        )
    return f"{what}{sure}; residual shifts: {moved}."
