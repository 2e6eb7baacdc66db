"""A stoichiometric gasoline night (fuel/air ratio held constant by closed-loop control, so it
only moves at an enrichment point): the analyzer delay must still come from the night's own
few transients, and CO2, O2 and air-meter faults must be named. Invented scenario (fault
injection with the forward model)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from conftest import SAMPLE_CONFIG

from pipeline.api import process_run
from pipeline.config import load_config
from pipeline.fuels import load_presets
from pipeline.testing.simulate import Fault, OperatingPoint, Scenario, make_night, write_csv

CONFIG = load_config(SAMPLE_CONFIG)

MAP = [  # (speed, torque, lambda, fuel kg/h, hold s, ramp s): closed loop at 1, rich at 3500
    OperatingPoint(1500, 50, 1.0, 3.0, 1500, 60, co_per_c=0.004, thc_per_c=0.002,
                   no_per_c=0.008),
    OperatingPoint(2500, 120, 1.0, 9.0, 1800, 60, co_per_c=0.004, thc_per_c=0.001,
                   no_per_c=0.015),
    OperatingPoint(3500, 180, 0.92, 19.0, 1200, 90, thc_per_c=0.001, no_per_c=0.004),
    OperatingPoint(2000, 80, 1.0, 5.0, 1500, 60, co_per_c=0.004, thc_per_c=0.0015,
                   no_per_c=0.01),
]


def _run(tmp_path, faults, delay=8.0):
    sc = Scenario(fuel=load_presets()["gasoline"], points=MAP, duration_h=8.0, seed=11,
                  analyzer_delay_s=delay, faults=faults)
    log, truth = make_night(sc)
    path = write_csv(log, tmp_path / "night.csv", units=log.attrs["units"])
    cfg = dataclasses.replace(
        CONFIG, fuel=load_presets()["gasoline"],
        sampling=dataclasses.replace(CONFIG.sampling, analyzer_delay_s=None),
    )
    return process_run(path, cfg), truth


def test_clean_stoichiometric_night_delay_and_no_flags(tmp_path):
    res, truth = _run(tmp_path, [], delay=10.0)
    al = res.group_attrs["alignment"]
    assert al["method"] == "cross-correlation"
    # t50 of 40 CFR 1065.308 (REFERENCES 1.12): transport delay + tau ln 2 (tau 1.5 s).
    assert abs(al["analyzer_delay_s"] - (10.0 + 1.5 * np.log(2))) < 1.0
    f = res.flags
    assert not f["check"].isin(["drift", "lambda_disagreement"]).any()
    steady = res.series["steady"].to_numpy() > 0
    lam = truth["lambda"].to_numpy()
    for name, tol in (("lambda_flow", 0.005), ("lambda_carbon", 0.01), ("lambda_oxygen", 0.01)):
        err = np.nanmedian(np.abs(res.series[name].to_numpy()[steady] / lam[steady] - 1))
        assert err < tol, (name, err)


@pytest.mark.parametrize(
    ("fault", "suspect"),
    [
        (Fault("co2", "span_drift", onset_h=4.0, size=-4.0, duration_h=2.0), "co2"),
        (Fault("o2", "zero_shift", onset_h=4.0, size=0.003, duration_h=0.0), "o2"),
        (Fault("air_mass_flow", "step", onset_h=4.0, size=4.0, duration_h=0.0),
         "air_mass_flow|fuel_mass_flow"),
    ],
)
def test_faults_on_a_stoichiometric_night(tmp_path, fault, suspect):
    res, _ = _run(tmp_path, [fault])
    f = res.flags[res.flags["check"].isin(["drift", "lambda_disagreement"])]
    assert len(f) >= 1 and set(f["suspect"]) == {suspect}
    onset = fault.onset_h * 3600.0
    assert f["start_s"].min() >= onset - 600 and f["start_s"].min() <= onset + 3600
