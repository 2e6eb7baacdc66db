"""Forward model: synthetic raw exhaust and synthetic overnight test-cell logs.

This module is deliberately independent of the inverse code (``pipeline.balance``): it builds
the exhaust *forwards* from the fuel, the intake air and lambda by counting atoms, so the
balance stage can be tested against it.

Two layers:

* :func:`exhaust_composition` -- element-exact composition of raw exhaust, per mole of fuel
  carbon, vectorised over arrays of lambda and intake humidity. Conventions follow the 40 CFR
  1065.655 chemical balance (REFERENCES 1.2, 1.4): dry air O2 + CO2 = 0.209820 with the intake
  CO2 displacing O2, argon 0.00934, nitrogen the rest; H2 from the water-gas relation
  x_CO x_H2O = K x_CO2 x_H2 with K = 3.5 (40 CFR 86.345-79), written with the excess-air CO2
  and water taken out as in Eq. 1065.655-4; O2 from the oxygen balance (lean), or O2 = 0 and
  CO/H2 from the oxygen balance plus the water-gas relation (rich).
* :func:`make_night` -- a whole night of logged channels as a cell logger would write them
  (steady-state map with ramps, drifting ambient, analyzer transport delay and first-order
  response, chiller water removal, noise, zero/span windows, logger dropouts, injected
  instrument faults), plus the truth; :func:`write_csv` writes the logger-like CSV.

Nothing here reads the project config: the simulator is self-contained on purpose.
"""

from __future__ import annotations

import gzip
import io
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy.signal import lfilter

from .. import constants as C
from ..fuels import Fuel

#: Wet species returned by :func:`exhaust_composition` (mole fractions, THC on a C1 basis).
SPECIES = ("co2", "co", "h2", "h2o", "o2", "n2", "ar", "thc", "no", "no2", "so2")

#: Instruments a :class:`Fault` can act on (canonical channel names).
FAULT_INSTRUMENTS = (
    "co2",
    "co",
    "o2",
    "nox",
    "thc",
    "air_mass_flow",
    "fuel_mass_flow",
    "lambda_sensor",
)
FAULT_KINDS = ("span_drift", "zero_shift", "step", "ramp")

#: analyzer_mode codes written by the simulator (common practice: 0 = sampling exhaust).
MODE_SAMPLE, MODE_ZERO, MODE_SPAN, MODE_PURGE = 0, 1, 2, 3


# ------------------------------------------------------------------------------------------
# water in air
# ------------------------------------------------------------------------------------------
def vapour_pressure_kpa(t_degC: ArrayLike) -> np.ndarray:
    """Saturation vapour pressure of water over liquid water, kPa.

    40 CFR 1065.645 (Goff 1957 form with the last term in kPa), REFERENCES 1.8 [V-ex]:
    log10(p/kPa) = 10.79574 (1 - 273.16/T) - 5.02800 log10(T/273.16)
    + 1.50475e-4 (1 - 10^(-8.2969 (T/273.16 - 1))) + 0.42873e-3 (10^(4.76955 (1 - 273.16/T)) - 1)
    - 0.2138602, T in K. Reproduces the CFR examples 9.5 degC -> 1.186581 kPa, 20 degC ->
    2.3371 kPa.
    """
    t = np.asarray(t_degC, dtype=float) + 273.15
    r = 273.16 / t
    log10p = (
        10.79574 * (1.0 - r)
        - 5.02800 * np.log10(t / 273.16)
        + 1.50475e-4 * (1.0 - 10.0 ** (-8.2969 * (t / 273.16 - 1.0)))
        + 0.42873e-3 * (10.0 ** (4.76955 * (1.0 - r)) - 1.0)
        - 0.2138602
    )
    return 10.0**log10p


def water_fraction_from_rh(
    t_degC: ArrayLike, rh_percent: ArrayLike, p_kpa: ArrayLike
) -> np.ndarray:
    """Water mole fraction of moist air from relative humidity: x = RH p_sat(T) / p.

    40 CFR 1065.645, REFERENCES 1.8 [V-ex] (example: RH 50.77 %, 20 degC, 99.980 kPa ->
    0.011868 mol/mol).
    """
    rh = np.asarray(rh_percent, dtype=float) / 100.0
    return rh * vapour_pressure_kpa(t_degC) / np.asarray(p_kpa, dtype=float)


def water_fraction_from_dewpoint(t_dew_degC: ArrayLike, p_kpa: ArrayLike) -> np.ndarray:
    """Water mole fraction at a dew point: x = p_sat(T_dew) / p.

    40 CFR 1065.645, REFERENCES 1.8 [V-ex] (example: 9.5 degC, 99.980 kPa -> 0.011868).
    """
    return vapour_pressure_kpa(t_dew_degC) / np.asarray(p_kpa, dtype=float)


# ------------------------------------------------------------------------------------------
# dry air
# ------------------------------------------------------------------------------------------
def dry_air(x_co2_int_dry: float = C.X_CO2_AIR_DRY) -> dict[str, float]:
    """Dry intake air composition, mol/mol, with a given CO2 content.

    REFERENCES 1.2 [C]: O2 + CO2 of dry air is the constant 0.209820 of Eq. 1065.655-9, so
    intake CO2 displaces O2; argon 0.00934; nitrogen the rest (0.78084). At the default
    375 umol/mol this is exactly the CFR dry air of 40 CFR 1065 (x_O2 = 0.209445).
    """
    o2_plus_co2 = C.X_O2_PLUS_CO2_AIR_DRY
    if not 0.0 <= x_co2_int_dry < o2_plus_co2:
        raise ValueError(f"intake CO2 must be in [0, {o2_plus_co2}), got {x_co2_int_dry}")
    o2 = o2_plus_co2 - x_co2_int_dry
    ar = C.X_AR_AIR_DRY
    n2 = 1.0 - o2_plus_co2 - ar
    return {"o2": o2, "co2": x_co2_int_dry, "ar": ar, "n2": n2}


def dry_air_molar_mass(x_co2_int_dry: float = C.X_CO2_AIR_DRY) -> float:
    """Molar mass of the dry air of :func:`dry_air`, g/mol (28.96559 at 375 umol/mol CO2)."""
    a = dry_air(x_co2_int_dry)
    return a["o2"] * C.M_O2 + a["co2"] * C.M_CO2 + a["ar"] * C.M_AR + a["n2"] * C.M_N2


# ------------------------------------------------------------------------------------------
# exhaust composition
# ------------------------------------------------------------------------------------------
def exhaust_composition(
    lam: ArrayLike,
    fuel: Fuel,
    x_h2o_int: ArrayLike,
    *,
    x_co2_int_dry: float = C.X_CO2_AIR_DRY,
    co_per_c: ArrayLike = 0.0,
    thc_c1_per_c: ArrayLike = 0.0,
    no_per_c: ArrayLike = 0.0,
    no2_per_c: ArrayLike = 0.0,
    k_wg: float = C.K_WATER_GAS,
) -> dict[str, np.ndarray]:
    """Element-exact raw exhaust composition for arrays of lambda and intake humidity.

    Per mole of fuel carbon, fuel CH_a O_b S_g N_d (a, b, g, d = alpha, beta, gamma, delta of
    40 CFR 1065.655(d)) burns with wet intake air holding lam (1 + a/4 - b/2 + g) mol O2
    (lambda = O2 supplied / O2 for complete combustion, the definition of REFERENCES 1.6 [D]);
    dry air per :func:`dry_air`, water x_h2o_int per mole of wet air.

    Products (all moles per mole fuel carbon; REFERENCES 1.4 Eq. 5 and 7 for the H and O
    bookkeeping, our own element-exact form [D]):

    * THC = ``thc_c1_per_c`` of the fuel carbon leaves unburned as CH_a (C1 basis);
    * NO, NO2 = ``no_per_c``, ``no2_per_c`` made from N2; fuel N leaves as N2;
    * SO2 = g (all fuel sulfur), counted with the dry gas;
    * CO2 = burned carbon not in CO plus the intake-air CO2;
    * H2 from the water-gas relation written as Eq. 1065.655-4,
      CO (H2O - H2O_excess-air) = K H2 (CO2 - CO2_excess-air), K = 3.5 (40 CFR 86.345-79);
      the excess air is the exhaust O2 divided by the O2 fraction of the wet intake air;
    * lean: CO = ``co_per_c`` (input) and O2 from the oxygen balance,
      O2 = (lam - 1) s + THC (1 + a/4) + CO/2 + H2/2 - NO/2 - NO2;
    * rich (where that O2 would be negative): O2 = 0, CO + H2 fixed by the oxygen balance and
      split by the water-gas relation (a quadratic, solved in its stable form).

    Returns wet mole fractions ``co2, co, h2, h2o, o2, n2, ar, thc, no, no2, so2``, dry mole
    fractions ``<species>_dry`` (every species but water, per mole of water-free gas), and the
    amounts per mole of fuel carbon ``n_wet_per_c`` (wet exhaust), ``n_dry_per_c``,
    ``n_air_dry_per_c`` (dry intake air), ``n_int_wet_per_c`` (wet intake air),
    ``n_h2o_int_per_c`` (intake water) and a boolean ``rich``. All arrays broadcast together.
    """
    lam_, xw, co_in, t, no, no2 = np.broadcast_arrays(
        *(
            np.asarray(v, dtype=float)
            for v in (lam, x_h2o_int, co_per_c, thc_c1_per_c, no_per_c, no2_per_c)
        )
    )
    if np.any(~(lam_ > 0)):
        raise ValueError("lambda must be positive")
    if np.any((xw < 0) | (xw >= 1)):
        raise ValueError("intake water fraction must be in [0, 1)")
    if np.any((t < 0) | (t >= 1) | (co_in < 0) | (no < 0) | (no2 < 0)):
        raise ValueError("THC, CO, NO and NO2 per fuel carbon must be >= 0 (THC < 1)")

    a, b, g, d = fuel.h_c, fuel.o_c, fuel.s_c, fuel.n_c
    s = 1.0 + a / 4.0 - b / 2.0 + g
    air = dry_air(x_co2_int_dry)

    n_air_dry = lam_ * s / air["o2"]
    n_w = n_air_dry * xw / (1.0 - xw)
    co2_int = n_air_dry * air["co2"]

    # carbon and hydrogen pools before the CO/H2 split
    c0 = 1.0 - t + co2_int  # CO2 if there were no CO
    w0 = a * (1.0 - t) / 2.0 + n_w  # H2O if there were no H2
    # O2 left with CO = H2 = 0 except the lean CO input
    p_lean = (lam_ - 1.0) * s + t * (1.0 + a / 4.0) + co_in / 2.0 - no / 2.0 - no2

    # lean branch: CO given; H2 from Eq. 1065.655-4 with excess air = O2 / x_O2,int(wet)
    r_c = air["co2"] / air["o2"]  # CO2 per O2 in intake air
    r_w = xw / ((1.0 - xw) * air["o2"])  # H2O per O2 in wet intake air
    c1 = c0 - co_in
    b_l = k_wg * (c1 - r_c * p_lean) + co_in * (1.0 + r_w / 2.0)
    a_l = k_wg * r_c / 2.0
    c_l = co_in * (w0 - r_w * p_lean)
    h2_lean = 2.0 * c_l / (b_l + np.sqrt(np.maximum(b_l * b_l - 4.0 * a_l * c_l, 0.0)))
    o2_lean = p_lean + h2_lean / 2.0
    rich = o2_lean < 0.0

    # rich branch: O2 = 0; CO + H2 = R from the O balance; CO (W0 - H2) = K (C0 - CO) H2
    big_r = 2.0 * ((1.0 - lam_) * s - t * (1.0 + a / 4.0) + no / 2.0 + no2)
    big_r = np.where(rich, big_r, 0.0)
    b_r = w0 - big_r + k_wg * (c0 + big_r)
    disc = np.maximum(b_r * b_r - 4.0 * (k_wg - 1.0) * k_wg * c0 * big_r, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        co_rich = np.where(rich, 2.0 * k_wg * c0 * big_r / (b_r + np.sqrt(disc)), 0.0)
    if np.any(rich & ((co_rich > c0) | (big_r - co_rich > w0))):
        raise ValueError("lambda too rich for this fuel: not enough oxygen to form CO")

    co = np.where(rich, co_rich, co_in)
    h2 = np.where(rich, big_r - co_rich, h2_lean)
    o2 = np.where(rich, 0.0, o2_lean)
    n = {
        "co2": c0 - co,
        "co": co,
        "h2": h2,
        "h2o": w0 - h2,
        "o2": o2,
        "n2": n_air_dry * air["n2"] + d / 2.0 - (no + no2) / 2.0,
        "ar": n_air_dry * air["ar"],
        "thc": t,
        "no": no,
        "no2": no2,
        "so2": np.full_like(t, g),
    }
    n_wet = sum(n.values())
    n_dry = n_wet - n["h2o"]
    out: dict[str, np.ndarray] = {k: v / n_wet for k, v in n.items()}
    out.update({f"{k}_dry": v / n_dry for k, v in n.items() if k != "h2o"})
    out["n_wet_per_c"] = n_wet
    out["n_dry_per_c"] = n_dry
    out["n_air_dry_per_c"] = n_air_dry
    out["n_int_wet_per_c"] = n_air_dry + n_w
    out["n_h2o_int_per_c"] = n_w
    out["rich"] = rich
    return out


def stoich_dry_air_fuel_ratio(fuel: Fuel, x_co2_int_dry: float = C.X_CO2_AIR_DRY) -> float:
    """Stoichiometric dry-air/fuel mass ratio for the air of :func:`dry_air`.

    AFR_st = (1 + a/4 - b/2 + g) M_air / (x_O2,dry D), REFERENCES 5 [D]; equal to
    ``Fuel.afr_stoich`` at the default 375 umol/mol intake CO2.
    """
    s = 1.0 + fuel.h_c / 4.0 - fuel.o_c / 2.0 + fuel.s_c
    x_o2 = dry_air(x_co2_int_dry)["o2"]
    return s * dry_air_molar_mass(x_co2_int_dry) / (x_o2 * fuel.molar_mass_per_c)


# ------------------------------------------------------------------------------------------
# scenario
# ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class OperatingPoint:
    """One steady operating point of the map, reached by a linear ramp of ``ramp_s``.

    co_per_c, thc_per_c, no_per_c: engine-out CO, THC (C1) and NO per mole of fuel carbon
    (the lean CO input of :func:`exhaust_composition`; ignored where the mixture is rich).
    """

    speed_rpm: float
    torque_Nm: float
    lam: float
    fuel_kg_h: float
    hold_s: float = 1800.0
    ramp_s: float = 60.0
    co_per_c: float = 0.002
    thc_per_c: float = 0.0005
    no_per_c: float = 0.004


@dataclass(frozen=True)
class Fault:
    """An instrument fault, applied to the logged signal only (the truth stays true).

    instrument: one of FAULT_INSTRUMENTS.
    kind: ``span_drift`` (gain ramps linearly from 1 to 1 + size/100 over duration_h, then
        holds), ``step`` (gain steps to 1 + size/100), ``zero_shift`` (additive offset
        ``size`` from the onset), ``ramp`` (additive offset ramping from 0 to ``size`` over
        duration_h, then holding).
    onset_h: hours after the start of the run.
    size: percent of reading for gain kinds; for additive kinds in canonical units
        (mol/mol for gases, kg/h for flows, 1 for the lambda sensor).
    duration_h: ramp duration (span_drift, ramp).
    """

    instrument: str
    kind: str
    onset_h: float
    size: float
    duration_h: float = 0.0

    def __post_init__(self) -> None:
        if self.instrument not in FAULT_INSTRUMENTS:
            raise ValueError(f"fault instrument {self.instrument!r} not in {FAULT_INSTRUMENTS}")
        if self.kind not in FAULT_KINDS:
            raise ValueError(f"fault kind {self.kind!r} not in {FAULT_KINDS}")


@dataclass(frozen=True)
class CalWindow:
    """An analyzer zero/span check: purge (ambient air), zero gas, span gas, purge again."""

    start_h: float
    purge_s: float = 120.0
    zero_s: float = 300.0
    span_s: float = 360.0

    @property
    def duration_s(self) -> float:
        """Total length of the window, s."""
        return 2 * self.purge_s + self.zero_s + self.span_s


#: Default logger column names (our own) per canonical quantity.
DEFAULT_COLUMNS: dict[str, str] = {
    "time": "time",
    "speed": "engine_speed",
    "torque": "engine_torque",
    "fuel_mass_flow": "fuel_flow",
    "air_mass_flow": "air_flow",
    "co2": "co2_dry",
    "co": "co_dry",
    "o2": "o2_dry",
    "nox": "nox_dry",
    "thc": "thc_hot",
    "lambda_sensor": "lambda_wb",
    "ambient_temperature": "cell_air_temp",
    "ambient_pressure": "baro",
    "ambient_humidity": "cell_air_rh",
    "analyzer_mode": "bench_mode",
    "sample_line_temperature": "line_temp",
}

#: Logged unit, factor from canonical unit, decimals written (logger resolution).
_LOG_UNITS: dict[str, tuple[str, float, int]] = {
    "time": ("s", 1.0, 1),
    "speed": ("rpm", 1.0, 1),
    "torque": ("N.m", 1.0, 1),
    "fuel_mass_flow": ("kg/h", 1.0, 3),
    "air_mass_flow": ("kg/h", 1.0, 1),
    "co2": ("%", 100.0, 3),
    "co": ("ppm", 1e6, 0),
    "o2": ("%", 100.0, 3),
    "nox": ("ppm", 1e6, 0),
    "thc": ("ppmC", 1e6, 1),
    "lambda_sensor": ("-", 1.0, 4),
    "ambient_temperature": ("degC", 1.0, 2),
    "ambient_pressure": ("kPa", 1.0, 3),
    "ambient_humidity": ("%", 1.0, 2),
    "analyzer_mode": ("-", 1.0, 0),
    "sample_line_temperature": ("degC", 1.0, 1),
}

#: Noise standard deviation per channel as (absolute in canonical unit, relative to reading);
#: typical instrument noise, common practice values from memory.
DEFAULT_NOISE: dict[str, tuple[float, float]] = {
    "speed": (1.5, 0.0),
    "torque": (0.4, 0.002),
    "fuel_mass_flow": (0.003, 0.002),
    "air_mass_flow": (0.3, 0.003),
    "co2": (20e-6, 0.002),
    "co": (2e-6, 0.01),
    "o2": (100e-6, 0.002),
    "nox": (1e-6, 0.005),
    "thc": (0.5e-6, 0.01),
    "lambda_sensor": (0.0, 0.004),
    "ambient_temperature": (0.05, 0.0),
    "ambient_pressure": (0.01, 0.0),
    "ambient_humidity": (0.3, 0.0),
}

#: Bottled span-gas values, dry mol/mol (our choice of typical ranges; common practice).
DEFAULT_SPAN_GAS: dict[str, float] = {
    "co2": 0.12,
    "co": 2000e-6,
    "o2": 0.2090,
    "nox": 1500e-6,
    "thc": 500e-6,
}


@dataclass
class Scenario:
    """A synthetic night in a test cell.

    The map ``points`` is run in order, repeated, until ``duration_h``; the run starts holding
    the first point. Ambient temperature, pressure and relative humidity drift linearly from
    their ``*_start`` to their ``*_end`` values, with a small cell-ventilation wobble on the
    temperature. Gas analyzers see the exhaust after ``analyzer_delay_s`` with a first-order
    response ``analyzer_tau_s``; the dry-basis ones (``dry_analyzers``) sample after a chiller
    at ``dryer_dewpoint_degC``. ``dropouts`` are (start_h, duration_s) intervals where the
    logger wrote empty cells.
    """

    fuel: Fuel
    points: Sequence[OperatingPoint]
    duration_h: float = 10.0
    rate_hz: float = 1.0
    seed: int = 0
    start_time: str = "2026-01-01T00:00:00Z"
    ambient_temperature_start_degC: float = 24.0
    ambient_temperature_end_degC: float = 21.0
    ambient_pressure_start_kPa: float = 98.8
    ambient_pressure_end_kPa: float = 98.4
    ambient_rh_start_percent: float = 40.0
    ambient_rh_end_percent: float = 48.0
    x_co2_int_dry: float = C.X_CO2_AIR_DRY
    analyzer_delay_s: float = 8.0
    analyzer_tau_s: float = 1.5
    lambda_sensor_delay_s: float = 0.3
    lambda_sensor_tau_s: float = 0.2
    dryer_dewpoint_degC: float = 4.0
    dry_analyzers: tuple[str, ...] = ("co2", "co", "o2", "nox")
    air_meter_basis: str = "wet"
    noise: Mapping[str, tuple[float, float]] = field(default_factory=lambda: dict(DEFAULT_NOISE))
    span_gas: Mapping[str, float] = field(default_factory=lambda: dict(DEFAULT_SPAN_GAS))
    cal_windows: Sequence[CalWindow] = ()
    dropouts: Sequence[tuple[float, float]] = ()
    faults: Sequence[Fault] = ()
    columns: Mapping[str, str] = field(default_factory=lambda: dict(DEFAULT_COLUMNS))
    sample_line_setpoint_degC: float = 190.0
    line_heater_trips: Sequence[tuple[float, float]] = ()
    line_tau_s: float = 240.0


def _schedule(points: Sequence[OperatingPoint], duration_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Knot times and point indices of the piecewise-linear map schedule (loop over points)."""
    if not points:
        raise ValueError("scenario needs at least one operating point")
    knots, idx = [0.0, points[0].hold_s], [0, 0]
    i = 0
    while knots[-1] < duration_s:
        i = (i + 1) % len(points)
        knots += [knots[-1] + points[i].ramp_s, knots[-1] + points[i].ramp_s + points[i].hold_s]
        idx += [i, i]
    return np.asarray(knots), np.asarray(idx)


def sample_line_temperature(
    time_s: np.ndarray,
    cell_air_degC: np.ndarray,
    setpoint_degC: float,
    trips: Sequence[tuple[float, float]],
    tau_s: float,
) -> np.ndarray:
    """Heated sample-line temperature, degC: held at the set point (with a 0.4 K, 10 min
    controller wobble); during a heater trip (start h, duration s) it cools towards the cell
    air and recovers after the reset, first order with ``tau_s`` (vectorised)."""
    line = setpoint_degC + 0.4 * np.sin(2 * np.pi * time_s / 600.0)
    for start_h, dur_s in trips:
        t0, t1 = start_h * 3600.0, start_h * 3600.0 + dur_s
        drop = setpoint_degC - cell_air_degC
        cool = setpoint_degC - drop * (1 - np.exp(-np.clip(time_s - t0, 0, None) / tau_s))
        at_reset = setpoint_degC - drop * (1 - np.exp(-(t1 - t0) / tau_s))
        warm = setpoint_degC - (setpoint_degC - at_reset) * np.exp(
            -np.clip(time_s - t1, 0, None) / tau_s
        )
        line = np.where((time_s >= t0) & (time_s < t1), cool, line)
        line = np.where(time_s >= t1, np.minimum(line, warm), line)
    return line


def _first_order(x: np.ndarray, dt: float, tau: float) -> np.ndarray:
    """First-order lag (exact discretisation of dy/dt = (x - y)/tau), started settled."""
    if tau <= 0:
        return x.copy()
    k = 1.0 - np.exp(-dt / tau)
    y, _ = lfilter([k], [1.0, -(1.0 - k)], x, zi=[(1.0 - k) * x[0]])
    return y


def _delay(time: np.ndarray, x: np.ndarray, delay_s: float) -> np.ndarray:
    """Signal seen ``delay_s`` later (held at its first value before the start)."""
    return np.interp(time - delay_s, time, x)


def _fault_shape(time_h: np.ndarray, f: Fault) -> np.ndarray:
    """0 before the onset, rising to 1 (linearly over duration_h for the ramp kinds)."""
    if f.kind in ("span_drift", "ramp") and f.duration_h > 0:
        return np.clip((time_h - f.onset_h) / f.duration_h, 0.0, 1.0)
    return (time_h >= f.onset_h).astype(float)


def apply_faults(
    time_h: np.ndarray, channel: str, x: np.ndarray, faults: Sequence[Fault]
) -> np.ndarray:
    """The logged signal of ``channel`` with every fault on that instrument applied.

    Gain kinds multiply by (1 + size/100 * shape), additive kinds add size * shape, in the
    order listed (our own fault model, common practice terms).
    """
    y = np.asarray(x, dtype=float).copy()
    for f in faults:
        if f.instrument != channel:
            continue
        shape = _fault_shape(time_h, f)
        if f.kind in ("span_drift", "step"):
            y = y * (1.0 + f.size / 100.0 * shape)
        else:
            y = y + f.size * shape
    return y


def make_night(scenario: Scenario) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Simulate a night: (logged frame with logger column names and units, truth frame).

    The logged frame holds the channels in logger units (``frame.attrs["units"]`` maps column
    to unit string), rounded to a logger's resolution, with noise, transport delay, response,
    chiller water removal (x_meas = x_wet (1 - x_H2O,meas) / (1 - x_H2O,exh), x_H2O,meas =
    p_sat(T_dew) / p; REFERENCES 1.7 and 1.8), zero/span windows, dropouts and faults. The
    truth frame (canonical units, engine time, no delay, no faults) holds ``time``,
    ``lambda``, ``speed``, ``torque``, ``fuel_mass_flow``, ``air_dry_mass_flow``,
    ``air_wet_mass_flow``, ``intake_water_fraction``, ``exhaust_water_fraction``,
    ``<species>_wet`` for every species, ``co2_dry`` etc., ``exhaust_molar_flow`` (mol/s),
    ``lambda_chem`` equivalence, the ambient values and ``analyzer_mode``.
    """
    sc = scenario
    rng = np.random.default_rng(sc.seed)
    dt = 1.0 / sc.rate_hz
    n = int(round(sc.duration_h * 3600.0 * sc.rate_hz)) + 1
    time = np.arange(n) * dt
    time_h = time / 3600.0
    frac = time / time[-1] if n > 1 else np.zeros(n)

    # --- engine schedule -------------------------------------------------------------------
    knots, idx = _schedule(sc.points, time[-1])

    def sched(attr: str) -> np.ndarray:
        vals = np.array([getattr(sc.points[i], attr) for i in idx], dtype=float)
        return np.interp(time, knots, vals)

    lam = sched("lam")
    fuel_kg_h = sched("fuel_kg_h")
    speed = sched("speed_rpm")
    torque = sched("torque_Nm")

    # --- ambient ---------------------------------------------------------------------------
    t_amb = (
        sc.ambient_temperature_start_degC
        + (sc.ambient_temperature_end_degC - sc.ambient_temperature_start_degC) * frac
        + 0.3 * np.sin(2 * np.pi * time / 1200.0)
    )
    p_amb = sc.ambient_pressure_start_kPa + (
        sc.ambient_pressure_end_kPa - sc.ambient_pressure_start_kPa
    ) * frac
    rh = sc.ambient_rh_start_percent + (
        sc.ambient_rh_end_percent - sc.ambient_rh_start_percent
    ) * frac
    x_w_int = water_fraction_from_rh(t_amb, rh, p_amb)

    # --- exhaust and flows (truth) ---------------------------------------------------------
    ex = exhaust_composition(
        lam,
        sc.fuel,
        x_w_int,
        x_co2_int_dry=sc.x_co2_int_dry,
        co_per_c=sched("co_per_c"),
        thc_c1_per_c=sched("thc_per_c"),
        no_per_c=sched("no_per_c"),
    )
    m_air = dry_air_molar_mass(sc.x_co2_int_dry)
    air_dry = lam * stoich_dry_air_fuel_ratio(sc.fuel, sc.x_co2_int_dry) * fuel_kg_h
    # wet/dry intake air mass, REFERENCES 1.6 [D]
    air_wet = air_dry * (1.0 + x_w_int / (1.0 - x_w_int) * C.M_H2O / m_air)
    n_c = fuel_kg_h / 3.6 / sc.fuel.molar_mass_per_c  # mol/s of fuel carbon (kg/h -> g/s)
    n_exh = n_c * ex["n_wet_per_c"]

    # --- analyzer mode ---------------------------------------------------------------------
    mode = np.zeros(n, dtype=int)
    for w in sc.cal_windows:
        t0 = w.start_h * 3600.0
        edges = np.cumsum([t0, w.purge_s, w.zero_s, w.span_s, w.purge_s])
        for code, lo, hi in zip(
            (MODE_PURGE, MODE_ZERO, MODE_SPAN, MODE_PURGE), edges[:-1], edges[1:], strict=True
        ):
            mode[(time >= lo) & (time < hi)] = code

    # --- analyzers ---------------------------------------------------------------------------
    x_w_exh_seen = _delay(time, ex["h2o"], sc.analyzer_delay_s)
    x_w_dryer = np.minimum(water_fraction_from_dewpoint(sc.dryer_dewpoint_degC, p_amb), 1.0)
    air = dry_air(sc.x_co2_int_dry)
    ambient_dry = {"co2": air["co2"], "co": 0.0, "o2": air["o2"], "nox": 0.0, "thc": 2e-6}
    logged: dict[str, np.ndarray] = {}
    wet_of = {
        "co2": ex["co2"],
        "co": ex["co"],
        "o2": ex["o2"],
        "nox": ex["no"] + ex["no2"],
        "thc": ex["thc"],
    }
    for gas, x_wet in wet_of.items():
        seen_wet = _delay(time, x_wet, sc.analyzer_delay_s)
        if gas in sc.dry_analyzers:
            x_w_meas = np.minimum(x_w_dryer, x_w_exh_seen)
            inlet = seen_wet * (1.0 - x_w_meas) / (1.0 - x_w_exh_seen)
            purge = ambient_dry[gas] * (1.0 - np.minimum(x_w_dryer, x_w_int))
        else:
            inlet = seen_wet
            purge = ambient_dry[gas] * (1.0 - x_w_int)
        inlet = np.where(mode == MODE_ZERO, 0.0, inlet)
        inlet = np.where(mode == MODE_SPAN, sc.span_gas.get(gas, 0.0), inlet)
        inlet = np.where(mode == MODE_PURGE, purge, inlet)
        logged[gas] = _first_order(inlet, dt, sc.analyzer_tau_s)

    logged["lambda_sensor"] = _first_order(
        _delay(time, lam, sc.lambda_sensor_delay_s), dt, sc.lambda_sensor_tau_s
    )
    logged["air_mass_flow"] = air_wet if sc.air_meter_basis == "wet" else air_dry
    logged["fuel_mass_flow"] = fuel_kg_h
    logged["speed"] = speed
    logged["torque"] = torque
    logged["ambient_temperature"] = t_amb
    logged["ambient_pressure"] = p_amb
    logged["ambient_humidity"] = rh

    for name in list(logged):
        logged[name] = apply_faults(time_h, name, logged[name], sc.faults)
        a_abs, a_rel = sc.noise.get(name, (0.0, 0.0))
        if a_abs or a_rel:
            sd = a_abs + a_rel * np.abs(logged[name])
            logged[name] = logged[name] + sd * rng.standard_normal(n)
    logged["analyzer_mode"] = mode.astype(float)
    logged["sample_line_temperature"] = sample_line_temperature(
        time, t_amb, sc.sample_line_setpoint_degC, sc.line_heater_trips, sc.line_tau_s
    )
    logged["time"] = time

    # --- to logger columns, units and resolution ---------------------------------------------
    dropout = np.zeros(n, dtype=bool)
    for start_h, dur_s in sc.dropouts:
        dropout |= (time >= start_h * 3600.0) & (time < start_h * 3600.0 + dur_s)
    cols: dict[str, np.ndarray] = {}
    units: dict[str, str] = {}
    for q in _LOG_UNITS:
        if q not in sc.columns:
            continue
        unit, factor, decimals = _LOG_UNITS[q]
        if q == "time":
            decimals = max(0, int(np.ceil(np.log10(sc.rate_hz) - 1e-9)))
        v = np.round(logged[q] * factor, decimals)
        if q != "time":
            v = np.where(dropout, np.nan, v)
        cols[sc.columns[q]] = pd.array(v).astype("Int64") if decimals == 0 else v
        units[sc.columns[q]] = unit
    log_df = pd.DataFrame(cols)
    log_df.attrs["units"] = units
    log_df.attrs["start_time"] = sc.start_time

    truth = {
        "time": time,
        "lambda": lam,
        "speed": speed,
        "torque": torque,
        "fuel_mass_flow": fuel_kg_h,
        "air_dry_mass_flow": air_dry,
        "air_wet_mass_flow": air_wet,
        "intake_water_fraction": x_w_int,
        "exhaust_water_fraction": ex["h2o"],
        "ambient_temperature": t_amb,
        "ambient_pressure": p_amb,
        "ambient_humidity": rh,
        "analyzer_mode": mode,
        "exhaust_molar_flow": n_exh,
        "rich": ex["rich"],
    }
    for sp in SPECIES:
        truth[f"{sp}_wet"] = ex[sp]
        if sp != "h2o":
            truth[f"{sp}_dry"] = ex[f"{sp}_dry"]
    return log_df, pd.DataFrame(truth)


# ------------------------------------------------------------------------------------------
# CSV writer
# ------------------------------------------------------------------------------------------
def write_csv(
    df: pd.DataFrame,
    path: str | Path,
    *,
    units: Mapping[str, str],
    delimiter: str = ",",
    decimal: str = ".",
    metadata: Mapping[str, Any] | None = None,
) -> Path:
    """Write a logger-like CSV: ``# key: value`` lines, a names row, a units row, the data.

    Empty cells stand for missing values. A path ending in ``.gz`` is gzip-compressed
    (reproducibly: no file name or time stamp in the gzip header).
    """
    if delimiter == decimal:
        raise ValueError("delimiter and decimal separator must differ")
    missing = [c for c in df.columns if c not in units]
    if missing:
        raise ValueError(f"no unit given for column(s): {', '.join(map(str, missing))}")
    path = Path(path)
    buf = io.StringIO()
    for key, value in (metadata or {}).items():
        buf.write(f"# {key}: {value}\n")
    buf.write(delimiter.join(map(str, df.columns)) + "\n")
    buf.write(delimiter.join(units[c] for c in df.columns) + "\n")
    df.to_csv(
        buf, sep=delimiter, decimal=decimal, header=False, index=False, na_rep="",
        lineterminator="\n",
    )
    data = buf.getvalue().encode("utf-8")
    if path.suffix == ".gz":
        with open(path, "wb") as raw, gzip.GzipFile(
            filename="", mode="wb", fileobj=raw, mtime=0, compresslevel=9
        ) as gz:
            gz.write(data)
    else:
        path.write_bytes(data)
    return path
