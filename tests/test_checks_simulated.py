"""Checks end to end on nights from the forward model (pipeline.testing.simulate) through ingest,
alignment and balance (pipeline.api.process_run): injected faults must be found with the
right suspect and onset, clean nights must stay quiet. Invented scenarios (fault injection).
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import SAMPLE_CONFIG

from pipeline.api import process_run
from pipeline.config import load_config
from pipeline.fuels import load_presets
from pipeline.testing.simulate import Fault, OperatingPoint, Scenario, make_night, write_csv

CONFIG = load_config(SAMPLE_CONFIG)

MAP = [
    OperatingPoint(1000, 30, 4.2, 1.19, 1200, 60),
    OperatingPoint(1500, 100, 2.6, 3.85, 1200, 60),
    OperatingPoint(2000, 200, 1.7, 9.0, 1500, 90),
    OperatingPoint(2500, 300, 1.35, 17.3, 1200, 120),
    OperatingPoint(3000, 250, 1.45, 18.5, 900, 60),
    OperatingPoint(1800, 150, 2.0, 6.36, 900, 90),
]


def _process(tmp_path, seed: int, faults=(), delay: float = 8.0, no_delay_config: bool = True):
    sc = Scenario(
        fuel=load_presets()["diesel_2"],
        points=MAP,
        duration_h=8.0,
        seed=seed,
        analyzer_delay_s=delay,
        faults=list(faults),
    )
    log, _ = make_night(sc)
    path = write_csv(log, tmp_path / f"night_{seed}.csv", units=log.attrs["units"])
    cfg = CONFIG
    if no_delay_config:  # the delay must come from the night itself
        from dataclasses import replace

        cfg = replace(CONFIG, sampling=replace(CONFIG.sampling, analyzer_delay_s=None))
    return process_run(path, cfg)


def _instrument_flags(result):
    f = result.flags
    return f[f["check"].isin(["drift", "lambda_disagreement"])]


@pytest.mark.parametrize(("seed", "delay"), [(1, 8.0), (2, 12.0), (3, 5.0)])
def test_clean_simulated_night(tmp_path, seed: int, delay: float) -> None:
    """The estimated delay is the t50 of 40 CFR 1065.308 (REFERENCES 1.12): the model's
    transport delay plus tau ln 2 of its first-order analyzer response (default tau 1.5 s;
    50 % of a first-order step response after tau ln 2). No drift or disagreement flag."""
    res = _process(tmp_path, seed, delay=delay)
    al = res.group_attrs["alignment"]
    assert al["method"] == "cross-correlation"
    t50 = delay + Scenario.analyzer_tau_s * np.log(2.0)
    assert al["analyzer_delay_s"] == pytest.approx(t50, abs=0.5)
    assert len(_instrument_flags(res)) == 0, _instrument_flags(res)


@pytest.mark.parametrize(
    ("fault", "suspect"),
    [
        (Fault("co2", "span_drift", onset_h=3.0, size=-4.0, duration_h=2.0), "co2"),
        (Fault("o2", "zero_shift", onset_h=3.5, size=0.003), "o2"),
        (Fault("air_mass_flow", "step", onset_h=4.0, size=4.0), "air_mass_flow|fuel_mass_flow"),
        (
            Fault("fuel_mass_flow", "span_drift", onset_h=3.0, size=-4.0, duration_h=1.5),
            "air_mass_flow|fuel_mass_flow",
        ),
    ],
)
def test_simulated_fault_is_named(tmp_path, fault: Fault, suspect: str) -> None:
    res = _process(tmp_path, 11, faults=[fault])
    flags = _instrument_flags(res)
    drift = flags[flags["check"] == "drift"]
    assert len(drift) >= 1, res.flags
    assert drift["suspect"].iloc[0] == suspect
    onset_s = fault.onset_h * 3600
    assert 0.0 <= drift["start_s"].iloc[0] - onset_s <= 3600.0
    assert (flags["start_s"] >= onset_s - 60.0).all()
    assert np.isfinite(res.tables["drift"]["min_detectable_drift_pct"]).all()
