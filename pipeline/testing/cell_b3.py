"""The Cell B3 demo scenario: the invented night of ``sample_runs/`` and of the benchmark.

Test cell "Cell B3", a 2.0 L turbocharged prototype diesel "D20-T" on #2 diesel, run
unattended through the night of 2026-03-14/15 on a repeated steady-state map. One instrument
fault is injected for the checks to find: the CO2 analyzer span drifts -4 % linearly from
03:10 UTC over 2 h; and the heated sample line's heater trips for 20 min from 05:30 UTC.
Everything here is our own invention, not measured data.
"""

from __future__ import annotations

from ..fuels import load_presets
from .simulate import CalWindow, Fault, OperatingPoint, Scenario

START = "2026-03-14T21:00:00Z"


def _pt(*args: float, co: float, thc: float, no: float) -> OperatingPoint:
    return OperatingPoint(*args, co_per_c=co, thc_per_c=thc, no_per_c=no)


#: The D20-T map: (speed rpm, torque N.m, lambda, fuel kg/h, hold s, ramp s, CO, THC, NO per C).
#: Fuel from an assumed brake specific fuel consumption of 215-380 g/kWh, lambda typical of a
#: turbo diesel (lean at part load); our invented engine, not measured data.
MAP = [
    _pt(1000, 30, 4.20, 1.19, 1800, 60, co=0.0045, thc=0.0020, no=0.0030),
    _pt(1500, 100, 2.60, 3.85, 1500, 60, co=0.0025, thc=0.0009, no=0.0045),
    _pt(2000, 200, 1.70, 9.00, 2100, 90, co=0.0012, thc=0.0004, no=0.0060),
    _pt(2500, 300, 1.35, 17.30, 2400, 120, co=0.0030, thc=0.0003, no=0.0050),
    _pt(3000, 250, 1.45, 18.50, 1500, 60, co=0.0020, thc=0.0003, no=0.0048),
    _pt(1800, 150, 2.00, 6.36, 1200, 90, co=0.0015, thc=0.0006, no=0.0055),
    _pt(3500, 120, 1.90, 11.70, 1800, 30, co=0.0018, thc=0.0006, no=0.0035),
]

#: The sample line's heater trips at 05:30 UTC (8.5 h) and is reset 20 min later.
LINE_HEATER_TRIP = (8.5, 20 * 60.0)

#: The injected fault (the truth the checks should find).
CO2_SPAN_DRIFT = Fault("co2", "span_drift", onset_h=6.0 + 10.0 / 60.0, size=-4.0, duration_h=2.0)


def cell_b3_scenario() -> Scenario:
    """The night of 2026-03-14 in Cell B3 (invented)."""
    return Scenario(
        fuel=load_presets()["diesel_2"],
        points=MAP,
        duration_h=10.0,
        rate_hz=1.0,
        seed=20260314,
        start_time=START,
        ambient_temperature_start_degC=24.5,
        ambient_temperature_end_degC=21.0,
        ambient_pressure_start_kPa=98.90,
        ambient_pressure_end_kPa=98.35,
        ambient_rh_start_percent=38.0,
        ambient_rh_end_percent=47.0,
        analyzer_delay_s=8.0,
        analyzer_tau_s=1.5,
        dryer_dewpoint_degC=4.0,
        cal_windows=[CalWindow(start_h=5.0)],  # 02:00-02:15 UTC
        dropouts=[(2.7, 62.0)],  # 23:42:00 UTC, 62 s of empty rows
        faults=[CO2_SPAN_DRIFT],
        line_heater_trips=[LINE_HEATER_TRIP],
    )


METADATA = {
    "cell": "Cell B3",
    "engine": "D20-T 2.0 L turbo diesel, prototype 2",
    "operator": "M. Lindqvist (unattended night run)",
    "start_time": START,
    "fuel": "diesel_2 (#2 diesel, CH1.80)",
    "test": "steady-state map, repeated",
}
