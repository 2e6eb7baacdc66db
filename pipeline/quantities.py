"""The glossary: canonical quantity names, their units and long names (DESIGN.md contract).

These names are used for config keys, DataFrame columns, HDF5 datasets and plot labels.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Quantity:
    """A canonical quantity: name, canonical unit (CF/UDUNITS spelling), long name, kind."""

    name: str
    unit: str
    long_name: str
    kind: str  # "time", "gas", "flow", "engine", "ambient", "sensor", "status", "derived"

    @property
    def needs_basis(self) -> bool:
        """Gas concentrations and the air meter need ``basis = "dry"`` or ``"wet"``."""
        return self.kind == "gas" or self.name == "air_mass_flow"


_INPUTS = [
    Quantity("time", "s", "time since start of run", "time"),
    Quantity("speed", "rpm", "engine speed", "engine"),
    Quantity("torque", "N.m", "engine brake torque", "engine"),
    Quantity("fuel_mass_flow", "kg/h", "fuel mass flow", "flow"),
    Quantity("air_mass_flow", "kg/h", "intake air mass flow", "flow"),
    Quantity("co2", "mol/mol", "CO2 mole fraction", "gas"),
    Quantity("co", "mol/mol", "CO mole fraction", "gas"),
    Quantity("o2", "mol/mol", "O2 mole fraction", "gas"),
    Quantity("nox", "mol/mol", "NOx mole fraction", "gas"),
    Quantity("no", "mol/mol", "NO mole fraction", "gas"),
    Quantity("no2", "mol/mol", "NO2 mole fraction", "gas"),
    Quantity("thc", "mol/mol", "total hydrocarbons mole fraction, C1 basis", "gas"),
    Quantity("h2", "mol/mol", "H2 mole fraction", "gas"),
    Quantity("lambda_sensor", "1", "lambda from the wide-band exhaust sensor", "sensor"),
    Quantity("ambient_temperature", "degC", "intake air temperature", "ambient"),
    Quantity("ambient_pressure", "kPa", "intake air absolute pressure", "ambient"),
    Quantity("ambient_humidity", "percent", "intake air relative humidity", "ambient"),
    Quantity("intake_humidity", "g/kg", "intake air humidity, g water per kg dry air", "ambient"),
    Quantity("exhaust_pressure", "kPa", "exhaust (sample) absolute pressure", "ambient"),
    Quantity("sample_line_temperature", "degC", "sample line temperature", "ambient"),
    Quantity("dryer_dewpoint", "degC", "sample dryer (chiller) outlet dew point", "ambient"),
    Quantity("analyzer_mode", "1", "analyzer status code (0 = sampling exhaust)", "status"),
]

#: Canonical input quantities, keyed by name.
INPUTS: dict[str, Quantity] = {q.name: q for q in _INPUTS}

# fmt: off
_DERIVED = [
    Quantity("lambda_flow", "1", "lambda from measured air and fuel mass flows", "derived"),
    Quantity("lambda_carbon", "1", "lambda from exhaust carbon balance (40 CFR 1065.655)", "derived"),
    Quantity("lambda_oxygen", "1", "lambda from exhaust oxygen balance (Brettschneider)", "derived"),
    Quantity("lambda_spindt", "1", "lambda by Spindt (SAE 650507), for comparison", "derived"),
    Quantity("lambda_iso16183", "1", "lambda by the ISO 16183 raw-exhaust form, for comparison", "derived"),
    Quantity("intake_water_fraction", "mol/mol", "water mole fraction of the intake air", "derived"),
    Quantity("exhaust_water_fraction", "mol/mol", "water mole fraction of the wet exhaust", "derived"),
    Quantity("exhaust_dewpoint", "degC", "dew point of the exhaust at exhaust pressure", "derived"),
    Quantity("air_dry_mass_flow", "kg/h", "intake dry-air mass flow", "derived"),
    Quantity("afr_flow", "1", "measured dry-air/fuel mass ratio", "derived"),
    Quantity("intake_molar_flow", "mol/s", "wet intake-air molar flow", "derived"),
    Quantity("intake_co2_fraction", "mol/mol", "CO2 mole fraction of the wet intake air", "derived"),
    Quantity("exhaust_molar_flow", "mol/s", "raw exhaust molar flow from intake air (40 CFR 1065.655(f))", "derived"),
    Quantity("exhaust_molar_flow_fuel", "mol/s", "raw exhaust molar flow from fuel flow (cross-check)", "derived"),
    Quantity("exhaust_mass_flow", "kg/h", "raw exhaust mass flow (intake air + fuel)", "derived"),
    Quantity("co2_wet", "mol/mol", "CO2 mole fraction, wet exhaust basis", "derived"),
    Quantity("co_wet", "mol/mol", "CO mole fraction, wet exhaust basis", "derived"),
    Quantity("o2_wet", "mol/mol", "O2 mole fraction, wet exhaust basis", "derived"),
    Quantity("nox_wet", "mol/mol", "NOx mole fraction, wet exhaust basis", "derived"),
    Quantity("thc_wet", "mol/mol", "THC mole fraction (C1), wet exhaust basis", "derived"),
    Quantity("co2_mass_flow", "g/h", "CO2 mass emission rate", "derived"),
    Quantity("co_mass_flow", "g/h", "CO mass emission rate", "derived"),
    Quantity("nox_mass_flow", "g/h", "NOx mass emission rate, as NO2", "derived"),
    Quantity("thc_mass_flow", "g/h", "THC mass emission rate, C1 basis with the fuel H/C", "derived"),
    Quantity("combustion_water_per_kg_fuel", "kg/kg", "water formed per kg of fuel burned", "derived"),
    Quantity("exhaust_water_per_kg_fuel", "kg/kg", "exhaust water (incl. intake humidity) per kg of fuel", "derived"),
    Quantity("co2_per_kg_fuel", "kg/kg", "CO2 formed per kg of fuel burned", "derived"),
    Quantity("brake_power", "kW", "brake power from speed and torque", "derived"),
    Quantity("sampling", "1", "1 where the analyzers sample exhaust, 0 where not", "derived"),
    Quantity("valid", "1", "1 where all three lambda estimates are defined", "derived"),
    Quantity("engine_state", "1", "engine operating state (0 off, 1 starting, 2 idle, 3 running)", "derived"),
    Quantity("steady", "1", "1 where the engine holds a steady operating point", "check"),
    Quantity("fuel_mass_flow_carbon", "kg/h", "fuel mass flow implied by air flow and exhaust carbon (fuel_mass_flow * lambda_flow / lambda_carbon)", "check"),
    Quantity("residual_fuel_flow", "1", "fuel_mass_flow_carbon / fuel_mass_flow - 1", "check"),
    Quantity("residual_carbon_flow", "1", "lambda_carbon / lambda_flow - 1", "check"),
    Quantity("residual_oxygen_flow", "1", "lambda_oxygen / lambda_flow - 1", "check"),
    Quantity("residual_oxygen_carbon", "1", "lambda_oxygen / lambda_carbon - 1", "check"),
    Quantity("residual_sensor_flow", "1", "lambda_sensor / lambda_flow - 1", "check"),
    Quantity("residual_sensor_carbon", "1", "lambda_sensor / lambda_carbon - 1", "check"),
    Quantity("residual_sensor_oxygen", "1", "lambda_sensor / lambda_oxygen - 1", "check"),
    Quantity("bench_state", "1", "what the analyzers see (0 sample, 1 zero, 2 span, 3 purge, 4 leak_check, 5 not_exhaust, 6 response)", "derived"),
]
# fmt: on

#: Derived series written by the balance stage, keyed by name.
DERIVED: dict[str, Quantity] = {q.name: q for q in _DERIVED}

#: Concentration channels that the analyzers deliver (subject to transport delay and basis).
GASES = tuple(q.name for q in _INPUTS if q.kind == "gas")


#: Columns of the result tables that are not series of the glossary: (units or None for
#: text, long name). ``<q>_mean`` / ``<q>_std`` of a glossary series, the emissions
#: ``<species>_g``, ``_g_h``, ``_g_per_kWh`` and ``_driftcor`` forms are derived by rule in
#: :func:`table_column`.
TABLE_COLUMNS: dict[str, tuple[str | None, str]] = {
    "start_s": ("s", "start of the interval, time since start of run"),
    "end_s": ("s", "end of the interval, time since start of run"),
    "onset_s": ("s", "onset of the drift, time since start of run"),
    "samples": ("1", "number of samples used"),
    "duration_h": ("h", "time covered by the samples used"),
    "label": (None, "steady point (SPnn) or the whole night"),
    "work_kWh": ("kW.h", "brake work"),
    "fuel_g": ("g", "fuel burned"),
    "bsfc_g_per_kWh": ("g/(kW.h)", "brake-specific fuel consumption"),
    "m_c_fuel_g": ("g", "carbon mass in the fuel burned (40 CFR 1065.643)"),
    "m_c_air_g": ("g", "carbon mass in the intake air (40 CFR 1065.643)"),
    "m_c_exh_g": ("g", "carbon mass in the exhaust (40 CFR 1065.643)"),
    "eps_aC_g": ("g", "absolute carbon-balance error (40 CFR 1065.643)"),
    "eps_aCrate_g_per_h": ("g/h", "carbon-balance error rate (40 CFR 1065.643)"),
    "eps_rC": ("1", "relative carbon-balance error (40 CFR 1065.643)"),
    "carbon_balance_verdict": (None, "carbon-balance error against the configured limits"),
    "driftcor_coverage": ("1", "share of the samples the drift correction covers"),
    "drift_validation": (None, "corrected vs uncorrected results within the 1065.550 limit"),
    "carbon_balance_error": ("1", "relative carbon-balance error of the steady point"),
    "residual": (None, "residual series"),
    "baseline": ("1", "median residual of the baseline blocks"),
    "noise_pct": ("percent", "robust noise of the residual's block medians"),
    "blocks": ("1", "number of steady blocks of the residual"),
    "size_pct": ("percent", "size of the drift (shift of the residual)"),
    "rate_pct_per_h": ("percent/h", "rate of a ramp drift"),
    "kind": (None, "shape or kind (step or ramp; zero or span)"),
    "min_detectable_drift_pct": ("percent", "smallest drift this night's noise lets be found"),
    "detected": ("1", "1 where a drift was found"),
    "value_unit": (None, "unit of value"),
    "gas": (None, "analyzer channel"),
    "source": (None, "where the reading comes from: the log's windows or the config"),
    "error_pct_of_span": ("percent", "reading minus reference, in percent of the span gas"),
}

#: Emission species of the tables and their plain names.
_SPECIES = {"co2": "CO2", "co": "CO", "nox": "NOx (as NO2)", "thc": "THC (C1)"}


def table_column(name: str) -> tuple[str | None, str] | None:
    """(units or None for text, long name) of a result-table column, or None when unknown."""
    if name in TABLE_COLUMNS:
        return TABLE_COLUMNS[name]
    for suffix, what in (("_mean", "mean"), ("_std", "standard deviation")):
        base = name.removesuffix(suffix)
        q = describe(base) if base != name else None
        if q is not None:
            return q.unit, f"{what} over the steady point of: {q.long_name}"
    corrected = name.endswith("_driftcor")
    base = name.removesuffix("_driftcor")
    for sp, label in _SPECIES.items():
        for suffix, unit, what in (("_g_per_kWh", "g/(kW.h)", "brake-specific"),
                                   ("_g_h", "g/h", "mean mass rate of"),
                                   ("_g", "g", "mass of")):
            if base == f"{sp}{suffix}":
                tail = ", drift-corrected (40 CFR 1065.672)" if corrected else ""
                return unit, f"{what} {label}{tail}"
        if base == f"{sp}_driftcor_diff" or name == f"{sp}_driftcor_diff":
            return "1", f"{label}: drift-corrected vs uncorrected, relative (1065.550)"
    q = describe(name)
    return (q.unit, q.long_name) if q is not None else None


def describe(name: str) -> Quantity | None:
    """The Quantity for a canonical name, or None if it is not in the glossary."""
    return INPUTS.get(name) or DERIVED.get(name)
