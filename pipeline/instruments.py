"""The one table of instruments: plain labels, which estimate each moves, check categories.

Every stage that names an instrument (the checks' verdicts, the console, the summary, the
figures) takes its wording and groupings from here, so a label is changed in one place.
Canonical instrument names are the quantity names of :mod:`pipeline.quantities`; a flag whose
``suspect`` lists several, ``|``-separated, blames any one of them.
"""

from __future__ import annotations

#: Instruments that always get a verdict (others only when a flag names them); the wide-band
#: lambda sensor joins them when it is logged.
CORE_INSTRUMENTS: tuple[str, ...] = ("co2", "o2", "air_mass_flow", "fuel_mass_flow")

#: Plain names of the instruments behind canonical channel names (and suspect sets).
INSTRUMENT_LABELS: dict[str, str] = {
    "co2": "CO2 analyzer",
    "co": "CO analyzer",
    "o2": "O2 analyzer",
    "thc": "THC analyzer",
    "nox": "NOx analyzer",
    "no": "NO analyzer",
    "no2": "NO2 analyzer",
    "h2": "H2 analyzer",
    "air_mass_flow": "air flow meter",
    "fuel_mass_flow": "fuel flow meter",
    "air_mass_flow|fuel_mass_flow": "air or fuel flow meter",
    "lambda_sensor": "wide-band lambda sensor",
    "speed": "speed measurement",
    "torque": "torque measurement",
    "sample_line_temperature": "sample line heating",
    "time": "logger clock",
}

#: The lambda estimate a fault of each suspect moves (DESIGN "Lambda estimates").
SUSPECT_ESTIMATE: dict[str, str] = {
    "co2": "lambda_carbon",
    "co": "lambda_carbon",
    "thc": "lambda_carbon",
    "o2": "lambda_oxygen",
    "air_mass_flow": "lambda_flow",
    "fuel_mass_flow": "lambda_flow",
    "air_mass_flow|fuel_mass_flow": "lambda_flow",
    "lambda_sensor": "lambda_sensor",
}

#: Residual name -> (numerator estimate, denominator estimate), by short estimate name;
#: ``residual_<a>_<b> = lambda_<a> / lambda_<b> - 1``.
RESIDUAL_PAIRS: dict[str, tuple[str, str]] = {
    "residual_carbon_flow": ("carbon", "flow"),
    "residual_oxygen_flow": ("oxygen", "flow"),
    "residual_oxygen_carbon": ("oxygen", "carbon"),
    "residual_sensor_flow": ("sensor", "flow"),
    "residual_sensor_carbon": ("sensor", "carbon"),
    "residual_sensor_oxygen": ("sensor", "oxygen"),
}

#: Short estimate name -> its series.
ESTIMATE_COLUMNS: dict[str, str] = {
    "flow": "lambda_flow",
    "carbon": "lambda_carbon",
    "oxygen": "lambda_oxygen",
    "sensor": "lambda_sensor",
}

#: Residual name -> (numerator series, denominator series).
RESIDUAL_SERIES: dict[str, tuple[str, str]] = {
    name: (ESTIMATE_COLUMNS[a], ESTIMATE_COLUMNS[b]) for name, (a, b) in RESIDUAL_PAIRS.items()
}

#: Residuals between the flow and exhaust estimates (no sensor).
CORE_RESIDUALS: tuple[str, ...] = (
    "residual_carbon_flow",
    "residual_oxygen_flow",
    "residual_oxygen_carbon",
)

#: Severity of a flag, least to most severe.
SEVERITY_RANK: dict[str, int] = {"info": 0, "warning": 1, "error": 2}

#: Checks that make an instrument a suspect of a measurement error.
FAULT_CHECKS: tuple[str, ...] = ("drift", "lambda_disagreement")

#: Checks that ask for attention to an instrument without blaming its reading.
ATTENTION_CHECKS: tuple[str, ...] = ("out_of_range", "condensation_risk")

#: Checks that say data are missing or not exhaust, not that an instrument is wrong.
AVAILABILITY_CHECKS: tuple[str, ...] = (
    "data_gap", "analyzer_not_sampling", "engine_off", "time_irregular",
)

#: Verdict statuses, in the order a reader lists them.
STATUS_ORDER: tuple[str, ...] = (
    "suspect", "shared suspect", "attention", "not enough data", "ok",
)


def label(instrument: str) -> str:
    """The plain name of an instrument (or suspect set); the canonical name when unknown."""
    if instrument in INSTRUMENT_LABELS:
        return INSTRUMENT_LABELS[instrument]
    parts = [p for p in instrument.split("|") if p]
    if len(parts) > 1:
        return " or ".join(INSTRUMENT_LABELS.get(p, p) for p in parts)
    return instrument


#: Unit of a flag's ``value`` by check (``/flags/value_unit``); out_of_range states its own
#: (percent of the range, or the reading's unit).
FLAG_VALUE_UNITS: dict[str, str] = {
    "drift": "percent",  # the suspect's lambda estimate moved by this
    "lambda_disagreement": "percent",
    "data_gap": "s",
    "analyzer_not_sampling": "1",  # samples
    "engine_off": "s",
    "condensation_risk": "K",  # smallest line temperature - dew point
    "time_irregular": "s",
    "method_invalid": "1",
}
