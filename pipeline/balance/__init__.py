"""Balance stage: intake humidity, the three lambda estimates, exhaust water and dew point.

A pure function of ingest's frame (canonical units, analyzers already time-aligned) and the
config; see :func:`compute_balance`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .. import constants as C
from ..config import Config
from ..errors import ConfigError
from ..fuels import Fuel
from ..records import columns_frame
from ..spans import runs
from .chemical import ChemicalBalance, chemical_balance
from .driftcor import apply_drift_correction
from .emissions import (
    KG_H_TO_G_S,
    brake_power_kw,
    emission_rates,
    exhaust_molar_flow_from_fuel,
    exhaust_molar_flow_from_intake,
    intake_molar_flow,
    water_and_co2_per_kg_fuel,
    wet_fractions,
)
from .flows import lambda_from_flows
from .humidity import (
    dewpoint_from_x_h2o,
    dry_air_from_wet,
    x_h2o_from_dewpoint,
    x_h2o_from_g_per_kg,
    x_h2o_from_rh,
)
from .methods import lambda_iso16183, lambda_spindt
from .oxygen import lambda_brettschneider, lambda_oxygen_carbon_free

#: Sampling state per sample (:attr:`BalanceResult.sampling_state`): the analyzers see
#: exhaust; they read gas that cannot be exhaust (CO2 + O2 above air's, span gas), or within
#: the response guard of a not-sampling stretch; exhaust carbon near zero while the bench
#: reads; the logged ``analyzer_mode`` reports zero/span/purge. Higher is the stronger reason.
STATE_SAMPLING, STATE_NOT_EXHAUST, STATE_LOW_CARBON, STATE_ANALYZER_MODE = 0, 1, 2, 3

#: Above this CO2 + O2 (mol/mol, as read) the analyzers cannot be seeing combustion exhaust:
#: air's O2 + CO2 is 0.2098 (REFERENCES 1.2), plus a margin for analyzer error and basis.
IMPOSSIBLE_O2_PLUS_CO2 = 0.225

__all__ = ["BalanceResult", "compute_balance", "chemical_balance", "lambda_brettschneider"]


@dataclass
class BalanceResult:
    """Derived series (same rows as the input frame), sampling state, notes and attributes.

    ``sampling_state`` says per sample whether and why the analyzers do not see exhaust
    (``STATE_*`` codes; the checks stage turns it into ``analyzer_not_sampling`` flags);
    ``chem`` keeps the full chemical-balance solution (None for fuels without carbon) for the
    emission calculations; ``x_h2o_dryer`` the water left in dry-basis samples; ``basis`` the
    dry/wet basis of each analyzer (NOx split into NO/NO2 included).
    """

    derived: pd.DataFrame
    sampling_state: np.ndarray
    warnings: list[str] = field(default_factory=list)
    attrs: dict[str, Any] = field(default_factory=dict)
    chem: ChemicalBalance | None = None
    x_h2o_dryer: np.ndarray | None = None
    basis: dict[str, str] = field(default_factory=dict)


def _col(frame: pd.DataFrame, name: str) -> np.ndarray | None:
    return frame[name].to_numpy(dtype=float) if name in frame else None


def intake_water_fraction(frame: pd.DataFrame, warnings: list[str]) -> np.ndarray:
    """Water mole fraction of the intake air from the logged ambient channels.

    ``ambient_humidity`` (% RH) with ``ambient_temperature`` and ``ambient_pressure``
    (40 CFR 1065.645(c)), or ``intake_humidity`` in g/kg dry air. Without either, dry intake
    air is assumed and a warning says so.
    """
    n = len(frame)
    p = _col(frame, "ambient_pressure")
    if p is None:
        p = np.full(n, C.P_STD_KPA)
    if "intake_humidity" in frame:
        return x_h2o_from_g_per_kg(frame["intake_humidity"].to_numpy(float))
    if "ambient_humidity" in frame:
        t = _col(frame, "ambient_temperature")
        if t is None:
            raise ConfigError(
                "[channels.ambient_humidity] is mapped but [channels.ambient_temperature] is "
                "not: relative humidity needs the air temperature. Map the intake air "
                "temperature channel (or give its value)."
            )
        if "ambient_pressure" not in frame:
            warnings.append(
                "ambient_pressure not mapped: the intake humidity assumes 101.325 kPa."
            )
        return x_h2o_from_rh(frame["ambient_humidity"].to_numpy(float), t, p)
    warnings.append(
        "No intake humidity channel mapped (ambient_humidity or intake_humidity): dry intake "
        "air assumed, which overstates dry air and lambda_flow by about 1.6 % per 10 g/kg of "
        "real humidity."
    )
    return np.zeros(n)


def compute_balance(
    frame: pd.DataFrame,
    config: Config,
    *,
    analyzer_delay_s: float = 0.0,
    engine_running: np.ndarray | None = None,
) -> BalanceResult:
    """Compute lambda_flow, lambda_carbon, lambda_oxygen, water and dew point for every sample.

    - lambda_flow: measured air (made dry with the intake humidity, REFERENCES 1.6) over fuel,
      divided by the fuel's stoichiometric dry-air ratio.
    - lambda_carbon: 40 CFR 1065.655 chemical balance (:mod:`.chemical`); CO2, CO, THC, NOx,
      H2 (estimated unless logged), intake humidity and CO2; not the O2 analyzer.
    - lambda_oxygen: Brettschneider (:mod:`.oxygen`) on dry-basis readings, wet readings
      converted with the chemical balance's exhaust water, intake-air CO2 removed.
    - exhaust_water_fraction and exhaust_dewpoint (IAPWS-IF97 saturation line at the exhaust
      pressure, else the ambient pressure).

    Where the analyzers do not sample exhaust (``analyzer_mode`` not 0, or exhaust carbon below
    ``[sampling] not_sampling_carbon_fraction``) the exhaust-based values are NaN and
    ``sampling_state`` says why. ``analyzer_delay_s`` is the shift
    already applied to the gas channels of ``frame``: the ``analyzer_mode`` channel (not
    shifted) is applied both as logged and shifted by it, and every not-sampling stretch is
    widened by ``[sampling] not_sampling_guard_s`` for the analyzers' response.

    ``engine_running`` (:func:`pipeline.states.running`): where False (engine off or still
    starting) lambdas and every exhaust-based value are NaN; they mean nothing there.
    """
    fuel = config.fuel
    s = config.sampling
    warnings: list[str] = []
    n = len(frame)

    x_h2o_int = intake_water_fraction(frame, warnings)
    air_basis = config.channels["air_mass_flow"].basis
    air = frame["air_mass_flow"].to_numpy(float)
    air_dry = dry_air_from_wet(air, x_h2o_int) if air_basis == "wet" else air
    fuel_flow = frame["fuel_mass_flow"].to_numpy(float)
    lam_flow = lambda_from_flows(air_dry, fuel_flow, fuel)
    on = np.ones(n, dtype=bool) if engine_running is None else np.asarray(engine_running, bool)
    lam_flow = np.where(on, lam_flow, np.nan)

    # Analyzer readings, as measured; NOx split into NO/NO2 when not measured apart.
    gases: dict[str, np.ndarray | None] = {
        g: _col(frame, g) for g in ("co2", "co", "thc", "no", "no2", "h2", "o2")
    }
    basis = {g: ch.basis for g, ch in config.channels.items() if ch.basis and g != "air_mass_flow"}
    nox = _col(frame, "nox")
    if nox is not None and gases["no"] is None and gases["no2"] is None:
        gases["no"] = nox * (1.0 - s.nox_no2_fraction)
        gases["no2"] = nox * s.nox_no2_fraction
        basis["no"] = basis["no2"] = basis["nox"]
    for opt in ("co", "thc"):
        if gases[opt] is None:
            warnings.append(f"{opt} not mapped: taken as zero in the carbon and oxygen balances.")

    p_amb = _col(frame, "ambient_pressure")
    if p_amb is None:
        p_amb = np.full(n, C.P_STD_KPA)
    # Water left in dry-basis samples (40 CFR 1065.659 / 1065.645): from a logged dryer
    # dew point, else the configured one, else none.
    p_dryer = s.dryer_pressure_kPa if s.dryer_pressure_kPa is not None else p_amb
    dryer_dew = _col(frame, "dryer_dewpoint")
    if dryer_dew is None and s.dryer_dewpoint_degC is not None:
        dryer_dew = np.full(n, s.dryer_dewpoint_degC)
    if dryer_dew is not None:
        x_h2o_dryer = np.nan_to_num(x_h2o_from_dewpoint(dryer_dew, p_dryer) * np.ones(n))
    else:
        x_h2o_dryer = np.zeros(n)

    state = sampling_state(frame, config, gases, analyzer_delay_s)
    sampling = state == STATE_SAMPLING

    exhaust = sampling & on

    def masked(x: np.ndarray | None) -> np.ndarray | None:
        return None if x is None else np.where(exhaust, x, np.nan)

    x_co2_int_dry = s.intake_co2_ppm * 1e-6
    o2 = masked(gases["o2"])
    chem = None
    o2_sensitivity = float("nan")
    if fuel.has_carbon:
        chem = chemical_balance(
            fuel,
            masked(gases["co2"]),
            masked(gases["co"]),
            masked(gases["thc"]),
            masked(gases["no"]),
            masked(gases["no2"]),
            masked(gases["h2"]),
            x_h2o_int=x_h2o_int,
            basis=basis,
            x_h2o_dryer=x_h2o_dryer,
            x_co2_int_dry=x_co2_int_dry,
        )
        x_h2o_exh = chem.x_h2o_exh
        lam_carbon = _positive(chem.lambda_)
        # Oxygen balance on dry readings: the O2 analyzer's basis with the same water rules.
        o2_dry = o2 / (1.0 - _analyzer_water(basis.get("o2"), x_h2o_dryer, x_h2o_exh))
        lam_oxygen = _positive(
            lambda_brettschneider(
                fuel,
                chem.dry["co2"],
                o2_dry,
                chem.dry["co"],
                chem.dry["thc"],
                chem.dry["no"],
                intake_co2_dry=x_co2_int_dry,
                h2_dry=chem.x_h2_dry,
            )
        )
        x_h2o_exh = np.where(np.isfinite(lam_carbon), x_h2o_exh, np.nan)
        o2_sensitivity = _o2_sensitivity(
            fuel, chem, o2_dry, o2, x_co2_int_dry, np.isfinite(lam_oxygen) & np.isfinite(lam_carbon)
        )
    else:
        warnings.append(
            f"Fuel '{fuel.name}' has no carbon: the carbon balance is undefined, so "
            "lambda_carbon is NaN; lambda_oxygen comes from the exhaust O2 alone."
        )
        lam_carbon = np.full(n, np.nan)
        lam_oxygen, x_h2o_exh = _carbon_free_oxygen_side(
            fuel, o2, basis.get("o2"), x_h2o_dryer, x_h2o_int, x_co2_int_dry
        )
    p_exh = _col(frame, "exhaust_pressure")
    dew = dewpoint_from_x_h2o(x_h2o_exh, p_exh if p_exh is not None else p_amb)

    exhaust_ok = np.isfinite(lam_oxygen) & (np.isfinite(lam_carbon) | (not fuel.has_carbon))
    valid = np.isfinite(lam_flow) & exhaust_ok
    derived_cols: dict[str, np.ndarray] = {
            "lambda_flow": lam_flow,
            "lambda_carbon": lam_carbon,
            "lambda_oxygen": lam_oxygen,
            "intake_water_fraction": x_h2o_int,
            "exhaust_water_fraction": x_h2o_exh,
            "exhaust_dewpoint": dew,
            "air_dry_mass_flow": air_dry,
            "sampling": sampling.astype(float),
            "valid": valid.astype(float),
    }
    extra = _derived_results(frame, config, chem, x_h2o_int, x_h2o_exh, x_h2o_dryer, basis)
    if config.extra_lambda:
        o2_dry_all = None
        if chem is not None and o2 is not None:
            o2_dry_all = o2 / (1.0 - _analyzer_water(basis.get("o2"), x_h2o_dryer, x_h2o_exh))
        methods, notes = _extra_lambdas(config, chem, o2_dry_all, n)
        extra.update(methods)
        warnings.extend(notes)
    derived = columns_frame({**derived_cols, **extra})

    attrs = {
        "dryer_water_fraction_mean": float(np.nanmean(x_h2o_dryer)) if n else 0.0,
        "intake_co2_dry_ppm": s.intake_co2_ppm,
        "nox_no2_fraction": s.nox_no2_fraction,
        "chemical_balance_iterations": chem.iterations if chem is not None else 0,
        "water_gas_constant": C.K_WATER_GAS,
        "o2_lambda_sensitivity": o2_sensitivity,
    }
    return BalanceResult(
        derived=derived, warnings=warnings, attrs=attrs, chem=chem,
        x_h2o_dryer=x_h2o_dryer, basis=basis, sampling_state=state,
    )


def sampling_state(
    frame: pd.DataFrame,
    config: Config,
    gases: dict[str, np.ndarray | None],
    analyzer_delay_s: float = 0.0,
) -> np.ndarray:
    """Per sample: whether and why the analyzers do not see exhaust (``STATE_*`` codes).

    ``analyzer_mode`` not 0 (as logged, and as seen through the analyzer shift), exhaust
    carbon below ``[sampling] not_sampling_carbon_fraction`` (carbon fuels), or CO2 + O2 above
    what exhaust can hold (span gas); every stretch widened by ``not_sampling_guard_s``.
    """
    fuel = config.fuel
    s = config.sampling
    n = len(frame)
    t = frame["time"].to_numpy(float)
    low_carbon = np.zeros(n, dtype=bool)
    impossible = np.zeros(n, dtype=bool)
    if fuel.has_carbon:
        # CO and THC may be missing (NaN counts as 0 there); a missing CO2 is a data gap,
        # not "not sampling".
        carbon = np.asarray(gases["co2"], dtype=float).copy()
        for g in ("co", "thc"):
            if gases[g] is not None:
                carbon = carbon + np.nan_to_num(gases[g], nan=0.0)
        low_carbon = np.isfinite(carbon) & (carbon < s.not_sampling_carbon_fraction)
    if gases["o2"] is not None and gases["co2"] is not None:
        # Combustion turns O2 into at most as many moles of CO2 (for any fuel with
        # H/C >= 2 O/C), so in exhaust CO2 + O2 stays below the O2 + CO2 of air (0.2098,
        # REFERENCES 1.2); more means span gases or a calibration mix at the analyzers.
        with np.errstate(invalid="ignore"):
            impossible = gases["o2"] + gases["co2"] > IMPOSSIBLE_O2_PLUS_CO2
    mode = _col(frame, "analyzer_mode")
    mode_logged = np.isfinite(mode) & (mode != 0) if mode is not None else np.zeros(n, bool)
    mode_seen = _mode_mask(t, mode, analyzer_delay_s) if mode is not None else mode_logged
    not_sampling = _widen(t, low_carbon | impossible | mode_seen, s.not_sampling_guard_s)
    # Why each sample is not exhaust, the strongest reason first (the checks stage words it).
    state = np.select(
        [mode_logged, low_carbon, not_sampling],
        [STATE_ANALYZER_MODE, STATE_LOW_CARBON, STATE_NOT_EXHAUST],
        STATE_SAMPLING,
    ).astype(np.int8)
    return state


def _derived_results(
    frame: pd.DataFrame,
    config: Config,
    chem: ChemicalBalance | None,
    x_h2o_int: np.ndarray,
    x_h2o_exh: np.ndarray,
    x_h2o_dryer: np.ndarray,
    basis: dict[str, str],
) -> dict[str, np.ndarray]:
    """Exhaust flow, wet concentrations, emission rates, water and CO2 per kg fuel, power.

    Carbon fuels: exhaust flow from the intake air through the chemical balance
    (1065.655(f)) and, as a cross-check, from the fuel flow. Fuels without carbon: complete
    combustion adds h/2 + n/2 - s mol per formula unit of fuel to the intake flow (our
    bookkeeping [D]); only NOx is then computed.
    """
    fuel = config.fuel
    air = frame["air_mass_flow"].to_numpy(float)
    fuel_flow = frame["fuel_mass_flow"].to_numpy(float)
    n_int = intake_molar_flow(air, x_h2o_int, basis=config.channels["air_mass_flow"].basis)
    out: dict[str, np.ndarray] = {
        "intake_molar_flow": n_int,
        # Eq. 1065.655-10: x_CO2int = x_CO2intdry / (1 + x_H2Ointdry).
        "intake_co2_fraction": config.sampling.intake_co2_ppm * 1e-6 * (1.0 - x_h2o_int),
    }
    if chem is not None:
        ok = np.isfinite(chem.lambda_) & (chem.lambda_ > 0)
        wet = {k: np.where(ok, v, np.nan) for k, v in wet_fractions(chem).items()}
        n_exh = np.where(ok, exhaust_molar_flow_from_intake(n_int, chem), np.nan)
        n_exh_fuel = np.where(ok, exhaust_molar_flow_from_fuel(fuel_flow, fuel, chem), np.nan)
        out["exhaust_molar_flow"] = n_exh
        out["exhaust_molar_flow_fuel"] = n_exh_fuel
        for g in ("co2", "co", "o2", "nox", "thc"):
            if g == "o2":
                if "o2" in frame:
                    o2 = frame["o2"].to_numpy(float)
                    w = _analyzer_water(basis.get("o2"), x_h2o_dryer, chem.x_h2o_exh)
                    out["o2_wet"] = np.where(ok, o2 / (1 - w) * (1 - chem.x_h2o_exh), np.nan)
                continue
            out[f"{g}_wet"] = wet[g]
        rates = emission_rates(wet, n_exh, fuel)
        if "nox" not in frame and "no" not in frame and "no2" not in frame:
            rates.pop("nox_mass_flow")
            out.pop("nox_wet")
        if "thc" not in frame:
            rates.pop("thc_mass_flow")
        out.update(rates)
        out.update(
            {k: np.where(ok, v, np.nan) for k, v in water_and_co2_per_kg_fuel(chem, fuel).items()}
        )
    else:
        n_fuel = fuel_flow * KG_H_TO_G_S / fuel.molar_mass_per_c
        n_exh = n_int + n_fuel * (fuel.h_c / 2 + fuel.n_c / 2 - fuel.o2_stoich_per_c)
        n_exh = np.where(np.isfinite(x_h2o_exh), n_exh, np.nan)
        out["exhaust_molar_flow"] = n_exh
        nox = frame["nox"].to_numpy(float) if "nox" in frame else None
        if nox is not None:
            w = _analyzer_water(basis.get("nox"), x_h2o_dryer, x_h2o_exh)
            out["nox_wet"] = nox / (1 - w) * (1 - x_h2o_exh)
            out["nox_mass_flow"] = C.M_NO2 * out["nox_wet"] * n_exh * 3600.0
    # Mass balance: everything that goes in comes out (wet intake air plus fuel).
    air_wet = n_int * ((1.0 - x_h2o_int) * C.M_AIR + x_h2o_int * C.M_H2O) / KG_H_TO_G_S
    out["exhaust_mass_flow"] = np.where(
        np.isfinite(out["exhaust_molar_flow"]), air_wet + fuel_flow, np.nan
    )
    if "speed" in frame and "torque" in frame:
        out["brake_power"] = brake_power_kw(frame["speed"], frame["torque"])
    return out


def _extra_lambdas(
    config: Config, chem: ChemicalBalance | None, o2_dry: np.ndarray | None, n: int
) -> tuple[dict[str, np.ndarray], list[str]]:
    """The alternative lambda methods asked for in ``[methods] extra_lambda``."""
    fuel = config.fuel
    out: dict[str, np.ndarray] = {}
    notes: list[str] = []
    for name in config.extra_lambda:
        if chem is None or (name == "spindt" and fuel.o_c > 0):
            why = "the fuel has no carbon" if chem is None else "Spindt has no fuel-oxygen term"
            notes.append(f"lambda_{name} not computed: {why} (fuel '{fuel.name}').")
            out[f"lambda_{name}"] = np.full(n, np.nan)
            continue
        if name == "spindt":
            o2 = o2_dry if o2_dry is not None else np.full(n, np.nan)
            lam = lambda_spindt(fuel, chem.dry["co2"], o2, chem.dry["co"], chem.dry["thc"])
        else:  # iso16183: CO2 and CO dry, THC wet
            lam = lambda_iso16183(
                fuel, chem.dry["co2"], chem.dry["co"], chem.dry["thc"] * (1 - chem.x_h2o_exh)
            )
        out[f"lambda_{name}"] = _positive(lam)
    return out, notes


def _mode_mask(t: np.ndarray, mode: np.ndarray, delay_s: float) -> np.ndarray:
    """Samples where ``analyzer_mode`` is not 0, as logged and as seen through the analyzer
    shift (the aligned gas value at t was read at t + delay)."""
    raw = np.isfinite(mode) & (mode != 0)
    if delay_s <= 0 or t.size == 0:
        return raw
    idx = np.clip(np.searchsorted(t, t + delay_s, side="right") - 1, 0, t.size - 1)
    return raw | raw[idx]


def _widen(t: np.ndarray, mask: np.ndarray, guard_s: float) -> np.ndarray:
    """``mask`` widened by ``guard_s`` on both sides of every run (vectorised)."""
    if guard_s <= 0 or not mask.any():
        return mask
    starts, ends = runs(mask)
    lo = np.searchsorted(t, t[starts] - guard_s, side="left")
    hi = np.searchsorted(t, t[ends] + guard_s, side="right")
    edges = np.zeros(t.size + 1, dtype=np.int64)
    np.add.at(edges, lo, 1)
    np.add.at(edges, hi, -1)
    return np.cumsum(edges[:-1]) > 0


def _o2_sensitivity(
    fuel: Fuel,
    chem: ChemicalBalance,
    o2_dry: np.ndarray | None,
    o2_read: np.ndarray | None,
    x_co2_int_dry: float,
    ok: np.ndarray,
) -> float:
    """d ln(lambda_oxygen) / d(O2 reading) at the night's median exhaust [1/(mol/mol)]: how
    much an O2 analyzer error moves the oxygen-balance lambda (a central difference of the
    Brettschneider equation, REFERENCES 2, at the median dry readings; the reading's own
    basis through the median dry/as-read ratio). NaN without O2 or valid samples."""
    if o2_dry is None or o2_read is None or not ok.any():
        return float("nan")

    def med(x: np.ndarray | None) -> np.ndarray:
        return np.array([float(np.nanmedian(x[ok])) if x is not None else 0.0])

    dry = {k: med(chem.dry[k]) for k in ("co2", "co", "thc", "no")}
    h2 = med(chem.x_h2_dry) if chem.x_h2_dry is not None else None
    o2 = med(o2_dry)
    step = 1e-4
    lam = [
        float(lambda_brettschneider(fuel, dry["co2"], o2 + d, dry["co"], dry["thc"], dry["no"],
                                    intake_co2_dry=x_co2_int_dry, h2_dry=h2)[0])
        for d in (-step, step)
    ]
    with np.errstate(invalid="ignore", divide="ignore"):  # O2 may read 0 at lambda 1
        r = o2_dry[ok] / o2_read[ok]
    r = r[np.isfinite(r)]
    ratio = float(np.median(r)) if r.size else float("nan")
    if not all(np.isfinite(v) and v > 0 for v in lam) or not np.isfinite(ratio):
        return float("nan")
    return (np.log(lam[1]) - np.log(lam[0])) / (2 * step) * ratio


def _positive(x: np.ndarray) -> np.ndarray:
    return np.where(np.isfinite(x) & (x > 0), x, np.nan)


def _analyzer_water(
    basis: str | None, x_h2o_dryer: np.ndarray, x_h2o_exh: np.ndarray
) -> np.ndarray:
    """Water in an analyzer's sample: the exhaust's (wet) or the dryer's, never more than the
    exhaust holds (40 CFR 1065.659, REFERENCES 1.7)."""
    return x_h2o_exh if basis == "wet" else np.minimum(x_h2o_dryer, x_h2o_exh)


def _carbon_free_oxygen_side(
    fuel: Fuel,
    o2: np.ndarray | None,
    o2_basis: str | None,
    x_h2o_dryer: np.ndarray,
    x_h2o_int: np.ndarray,
    x_co2_int_dry: float,
) -> tuple[np.ndarray, np.ndarray]:
    """lambda_oxygen and exhaust water for a fuel without carbon (hydrogen, ammonia).

    Water per formula unit: h/2 from the fuel plus the intake air's water; dry gas: the dry
    air less the O2 consumed plus the fuel's N2 (the bookkeeping of
    :func:`.oxygen.lambda_oxygen_carbon_free`). Solved with the O2 reading's basis by a few
    fixed-point passes (the water changes lambda only through the dry conversion).
    """
    n = x_h2o_int.size
    if o2 is None:
        return np.full(n, np.nan), np.full(n, np.nan)
    s_o2 = fuel.o2_stoich_per_c
    x_a = C.X_O2_PLUS_CO2_AIR_DRY - x_co2_int_dry
    r = x_h2o_int / (1.0 - x_h2o_int)
    x_w = np.zeros(n)
    lam = np.full(n, np.nan)
    for _ in range(30):
        lam = lambda_oxygen_carbon_free(
            fuel, o2 / (1.0 - _analyzer_water(o2_basis, x_h2o_dryer, x_w)),
            intake_co2_dry=x_co2_int_dry,
        )
        air = lam * s_o2 / x_a
        water = fuel.h_c / 2.0 + air * r
        new = water / (air - s_o2 + fuel.n_c / 2.0 + water)
        if np.nanmax(np.abs(new - x_w), initial=0.0) < 1e-12:
            x_w = new
            break
        x_w = new
    return lam, x_w


#: Emission rates repeated on the drift-corrected readings.
DRIFTCOR_RATES = ("co2_mass_flow", "co_mass_flow", "nox_mass_flow", "thc_mass_flow")


@dataclass
class DriftCorrected:
    """The balance on drift-corrected analyzer readings (40 CFR 1065.672).

    series: the corrected gases and emission rates, named ``<name>_driftcor``; derived: the
    whole balance on the corrected readings (for the 1065.550 comparison of the emissions
    table); readings: the zero/span readings used (the ``drift_correction`` table); notes:
    plain sentences for the console.
    """

    series: dict[str, np.ndarray]
    derived: pd.DataFrame
    readings: pd.DataFrame
    notes: list[str] = field(default_factory=list)


def drift_corrected(
    frame: pd.DataFrame,
    config: Config,
    *,
    analyzer_delay_s: float = 0.0,
    engine_running: np.ndarray | None = None,
) -> DriftCorrected | None:
    """Drift-correct the configured analyzers and compute the balance again on them
    (:func:`.driftcor.apply_drift_correction`, 40 CFR 1065.672); None when no analyzer has a
    ``[drift_correction.<gas>]`` table."""
    corrected_frame, readings, notes = apply_drift_correction(frame, config)
    if corrected_frame is None or readings is None:
        return None
    derived = compute_balance(corrected_frame, config, analyzer_delay_s=analyzer_delay_s,
                              engine_running=engine_running).derived
    series = {f"{g}_driftcor": corrected_frame[g].to_numpy() for g in config.drift_correction.gases}
    series.update({f"{r}_driftcor": derived[r].to_numpy() for r in DRIFTCOR_RATES if r in derived})
    return DriftCorrected(series, derived, readings, notes)
