"""Regenerate the demo run of sample_runs/ from the forward model.

Usage: ``python sample_runs/make_sample_runs.py`` (from the repository root).

The scenario is our own invention: test cell "Cell B3", a 2.0 L turbocharged prototype
diesel "D20-T" on #2 diesel, run unattended through the night of 2026-03-14/15 on a repeated
steady-state map. One instrument fault is injected for the checks to find (see README.md in
this folder): the CO2 analyzer span drifts -4 % linearly from 03:10 UTC over 2 h; and the
heated sample line's heater trips for 20 min from 05:30 UTC.
"""

from __future__ import annotations

from pathlib import Path

from pipeline.testing.cell_b3 import METADATA, cell_b3_scenario
from pipeline.testing.simulate import make_night, write_csv

HERE = Path(__file__).resolve().parent


def main() -> None:
    """Write sample_runs/cell_b3_2026-03-14.csv.gz."""
    log, _truth = make_night(cell_b3_scenario())
    out = write_csv(
        log, HERE / "cell_b3_2026-03-14.csv.gz", units=log.attrs["units"], metadata=METADATA
    )
    print(f"wrote {out} ({out.stat().st_size / 1e6:.2f} MB, {len(log)} rows)")


if __name__ == "__main__":
    main()
