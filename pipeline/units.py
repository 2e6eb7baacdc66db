"""Unit spellings of logger exports and their conversion to the canonical units.

Our own alias table (a general unit library would read ``Nm`` as nanometre). Each canonical
quantity (quantities.INPUTS) belongs to one *dimension*; each dimension has a table of
accepted spellings with a linear conversion ``canonical = value * scale + offset``.

Matching is tolerant of the usual variations: surrounding brackets (``[rpm]``), spaces,
the product dot (``N.m``, ``N m``, ``N·m``, ``Nm``), the micro sign (``µ``/``μ``/``u``), the
degree sign (``°C``, ``degC``, ``deg C``), superscripts (``min⁻¹``) and letter case — except
where case decides the meaning (``MPa``, which is only accepted as written).

Conversion factors are exact definitions unless noted:
- 1 lb = 0.45359237 kg (international yard and pound agreement, 1959);
- 1 lbf = 0.45359237 kg x 9.80665 m/s2 (standard gravity, 3rd CGPM 1901); 1 ft = 0.3048 m,
  1 in = 0.0254 m (same agreement);
- 1 bar = 100 kPa, 1 hPa = 1 mbar = 0.1 kPa (SI brochure, 9th ed., Table 8);
- 1 mmHg = 133.322387415 Pa and 1 inHg = 3386.389 Pa (conventional values, NIST SP 811,
  2008, Appendix B.8);
- T/K = t/degC + 273.15 (SI definition); t/degC = (t/degF - 32) / 1.8 (definition of the
  Fahrenheit scale);
- 1 grain = 1/7000 lb (same agreement), so 1 gr/lb = 1/7 g/kg;
- 1 ft3 = 0.028316846592 m3 (from the foot); a standard or normal volume flow of air is a
  mass flow at the air density of its reference state, rho = p M_air / (R T) (ideal gas;
  M_air of dry air, REFERENCES 1.1; R = 8.314462618 J/(mol K), CODATA 2018). The reference
  states are the config's ``[input] standard_temperature_degC`` / ``standard_pressure_kPa``
  (default 60 degF and 101.325 kPa, the usual US "standard" for scfm) for ``scfm`` and
  ``Sm3/h``, and 0 degC, 101.325 kPa (DIN 1343 "normal") for ``Nm3/h``.

A basis written inside the unit (``%vol dry``, ``ppm wet``, ``ppm (dry)``) is accepted; it must
agree with the channel's ``basis`` (:func:`split_basis`). Gauge pressures (``psig``, ``kPag``,
``barg``, ``mbarg``) convert to the gauge reading in kPa and are flagged ``gauge``: ingest adds
the ambient pressure.
"""

from __future__ import annotations

import math
import re
import unicodedata
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from .constants import P_STD_KPA
from .errors import ConfigError
from .quantities import INPUTS

_LB = 0.45359237  # kg, exact
_G0 = 9.80665  # m/s2, exact
_FT = 0.3048  # m, exact
_IN = 0.0254  # m, exact
_LBF = _LB * _G0  # N


@dataclass(frozen=True)
class Conversion:
    """A linear conversion to a canonical unit: ``canonical = value * scale + offset``.

    Instances are callables on numpy arrays (and scalars).
    """

    unit: str
    quantity: str
    scale: float
    offset: float = 0.0
    gauge: bool = False  # a gauge pressure: the ambient pressure must be added

    def __call__(self, values: np.ndarray) -> np.ndarray:
        """Convert ``values`` (in ``self.unit``) to the canonical unit of ``self.quantity``."""
        arr = np.asarray(values, dtype=np.float64)
        if self.scale == 1.0 and self.offset == 0.0:
            return arr
        return arr * self.scale + self.offset

    @property
    def is_identity(self) -> bool:
        """True when values are already in canonical units."""
        return self.scale == 1.0 and self.offset == 0.0

    def same_as(self, other: Conversion) -> bool:
        """True when both conversions give the same result (up to rounding)."""
        return math.isclose(self.scale, other.scale, rel_tol=1e-9) and math.isclose(
            self.offset, other.offset, rel_tol=1e-9, abs_tol=1e-12
        )


# Dimension of each canonical quantity.
_DIMENSION: dict[str, str] = {
    "time": "time",
    "speed": "speed",
    "torque": "torque",
    "fuel_mass_flow": "mass_flow",
    "air_mass_flow": "mass_flow",
    "co2": "fraction",
    "co": "fraction",
    "o2": "fraction",
    "nox": "fraction",
    "no": "fraction",
    "no2": "fraction",
    "thc": "fraction",
    "h2": "fraction",
    "lambda_sensor": "ratio",
    "ambient_temperature": "temperature",
    "ambient_pressure": "pressure",
    "ambient_humidity": "relative_humidity",
    "intake_humidity": "humidity_ratio",
    "exhaust_pressure": "pressure",
    "sample_line_temperature": "temperature",
    "dryer_dewpoint": "temperature",
    "analyzer_mode": "code",
}

_DIMENSION_NAMES = {
    "time": "a time",
    "speed": "a rotational speed",
    "torque": "a torque",
    "mass_flow": "a mass flow",
    "fraction": "a concentration (mole fraction)",
    "ratio": "a dimensionless ratio",
    "temperature": "a temperature",
    "pressure": "a pressure",
    "relative_humidity": "a relative humidity",
    "humidity_ratio": "a humidity ratio",
    "code": "a status code",
    "volume_flow": "a volume flow",
    "gauge_pressure": "a gauge pressure",
    "air_volume_flow": "a standard volume flow of air",
    "air_normal_flow": "a normal volume flow of air",
}

# Accepted spellings per dimension: spelling -> (scale, offset) to the canonical unit.
# The first spelling of each entry group is the one shown in messages.
_TABLE: dict[str, dict[str, tuple[float, float]]] = {
    "time": {
        "s": (1.0, 0.0), "sec": (1.0, 0.0), "second": (1.0, 0.0), "seconds": (1.0, 0.0),
        "ms": (1e-3, 0.0), "min": (60.0, 0.0), "h": (3600.0, 0.0), "hr": (3600.0, 0.0),
    },
    "speed": {
        "rpm": (1.0, 0.0), "1/min": (1.0, 0.0), "min-1": (1.0, 0.0), "min^-1": (1.0, 0.0),
        "r/min": (1.0, 0.0), "rev/min": (1.0, 0.0), "U/min": (1.0, 0.0),
        "rad/s": (60.0 / (2.0 * math.pi), 0.0),
    },
    "torque": {
        "N.m": (1.0, 0.0), "Nm": (1.0, 0.0), "N m": (1.0, 0.0), "N·m": (1.0, 0.0),
        "kN.m": (1e3, 0.0), "kNm": (1e3, 0.0),
        "lbf.ft": (_LBF * _FT, 0.0), "lbf ft": (_LBF * _FT, 0.0), "ft.lbf": (_LBF * _FT, 0.0),
        "lb.ft": (_LBF * _FT, 0.0), "ft.lb": (_LBF * _FT, 0.0),
        "lb-ft": (_LBF * _FT, 0.0), "ft-lb": (_LBF * _FT, 0.0), "lbf-ft": (_LBF * _FT, 0.0),
        "ft-lbf": (_LBF * _FT, 0.0),
    },
    "mass_flow": {
        "kg/h": (1.0, 0.0), "g/s": (3.6, 0.0), "kg/s": (3600.0, 0.0), "kg/min": (60.0, 0.0),
        "g/h": (1e-3, 0.0), "g/min": (0.06, 0.0), "lb/h": (_LB, 0.0), "lb/min": (60.0 * _LB, 0.0),
        "lb/hr": (_LB, 0.0), "lbm/h": (_LB, 0.0), "lbm/hr": (_LB, 0.0), "pph": (_LB, 0.0),
        "lb/s": (3600.0 * _LB, 0.0),
    },
    "fraction": {
        "mol/mol": (1.0, 0.0), "%": (1e-2, 0.0), "%vol": (1e-2, 0.0), "vol%": (1e-2, 0.0),
        "% vol": (1e-2, 0.0), "vol-%": (1e-2, 0.0), "percent": (1e-2, 0.0),
        "ppm": (1e-6, 0.0), "ppmv": (1e-6, 0.0), "ppmC": (1e-6, 0.0), "ppmC1": (1e-6, 0.0),
        "ppb": (1e-9, 0.0), "mmol/mol": (1e-3, 0.0), "umol/mol": (1e-6, 0.0),
        "µmol/mol": (1e-6, 0.0), "nmol/mol": (1e-9, 0.0),
        "-": (1.0, 0.0), "1": (1.0, 0.0), "fraction": (1.0, 0.0),
    },
    "ratio": {"1": (1.0, 0.0), "-": (1.0, 0.0), "": (1.0, 0.0), "fraction": (1.0, 0.0)},
    "code": {"1": (1.0, 0.0), "-": (1.0, 0.0), "": (1.0, 0.0), "code": (1.0, 0.0)},
    "temperature": {
        "degC": (1.0, 0.0), "°C": (1.0, 0.0), "C": (1.0, 0.0), "deg C": (1.0, 0.0),
        "celsius": (1.0, 0.0), "K": (1.0, -273.15), "kelvin": (1.0, -273.15),
        "degF": (1.0 / 1.8, -32.0 / 1.8), "°F": (1.0 / 1.8, -32.0 / 1.8),
        "F": (1.0 / 1.8, -32.0 / 1.8),
    },
    "pressure": {
        "kPa": (1.0, 0.0), "hPa": (0.1, 0.0), "mbar": (0.1, 0.0), "bar": (100.0, 0.0),
        "Pa": (1e-3, 0.0), "MPa": (1e3, 0.0), "psi": (_LBF / _IN**2 / 1e3, 0.0),
        "psia": (_LBF / _IN**2 / 1e3, 0.0), "inHg": (3.386389, 0.0),
        "mmHg": (0.133322387415, 0.0),
    },
    # gauge readings (to kPa above ambient); ingest adds the ambient pressure
    "gauge_pressure": {
        "psig": (_LBF / _IN**2 / 1e3, 0.0), "kPag": (1.0, 0.0), "kPa(g)": (1.0, 0.0),
        "kPa gauge": (1.0, 0.0), "barg": (100.0, 0.0), "bar(g)": (100.0, 0.0),
        "mbarg": (0.1, 0.0), "hPag": (0.1, 0.0), "inH2O": (0.24908891, 0.0),
        "mmH2O": (0.00980665, 0.0),
    },
    "relative_humidity": {
        "%": (1.0, 0.0), "%RH": (1.0, 0.0), "% RH": (1.0, 0.0), "percent": (1.0, 0.0),
        "-": (100.0, 0.0), "1": (100.0, 0.0), "fraction": (100.0, 0.0),
    },
    "humidity_ratio": {
        "g/kg": (1.0, 0.0), "kg/kg": (1e3, 0.0), "gr/lb": (1000.0 / 7000.0, 0.0),
        "grains/lb": (1000.0 / 7000.0, 0.0), "g/kg dry air": (1.0, 0.0),
    },
    # air by standard/normal volume (m3/h at the reference state, then times its density)
    "air_volume_flow": {
        "scfm": (_FT**3 * 60.0, 0.0), "SCFM": (_FT**3 * 60.0, 0.0),
        "scfh": (_FT**3, 0.0), "Sm3/h": (1.0, 0.0),
    },
    "air_normal_flow": {"Nm3/h": (1.0, 0.0), "Nm3/min": (60.0, 0.0)},
    # Volumetric fuel flow, to m3/h (then times the fuel density).
    "volume_flow": {
        "l/min": (60e-3, 0.0), "l/h": (1e-3, 0.0), "ml/min": (60e-6, 0.0),
        "ml/s": (3.6e-3, 0.0), "m3/h": (1.0, 0.0),
    },
}

#: Gas constant [J/(mol K)], CODATA 2018 (exact since the 2019 SI).
R_GAS = 8.314462618

#: Default reference state of standard volume flows: 60 degF, 101.325 kPa (common US practice
#: for scfm; state your cell's in [input] standard_temperature_degC / standard_pressure_kPa).
STANDARD_TEMPERATURE_DEGC = (60.0 - 32.0) / 1.8
STANDARD_PRESSURE_KPA = P_STD_KPA
#: Reference state of normal volume flows (Nm3): 0 degC, 101.325 kPa (DIN 1343).
NORMAL_TEMPERATURE_DEGC = 0.0
NORMAL_PRESSURE_KPA = P_STD_KPA


def air_density(temperature_degc: float, pressure_kpa: float) -> float:
    """Density of dry air [kg/m3] at a reference state, ideal gas rho = p M / (R T)."""
    from .constants import M_AIR

    return pressure_kpa * 1e3 * M_AIR * 1e-3 / (R_GAS * (temperature_degc + 273.15))


_BASIS_RE = re.compile(r"^(?P<unit>.*?)[\s,;]*[\(\[]?\s*(?P<basis>dry|wet)\s*[\)\]]?\s*$",
                       re.IGNORECASE)


def split_basis(unit: str) -> tuple[str, str | None]:
    """``("%vol", "dry")`` for ``"%vol dry"``; ``(unit, None)`` when no basis is written in it.
    (``"g/kg dry air"`` is a humidity unit, not a basis.)"""
    text = "" if unit is None else str(unit)
    m = _BASIS_RE.match(text)
    if m is None or not m.group("unit").strip() or text.strip().lower().endswith("dry air"):
        return text, None
    return m.group("unit").strip(), m.group("basis").lower()


# Spellings whose letter case carries the meaning (MPa vs mPa): matched only as written.
_CASE_SENSITIVE = {"MPa"}


def _key(unit: str) -> str:
    """Normalised lookup key of a unit spelling (case kept)."""
    s = unit.replace("\u00b0", "deg").replace("\u00ba", "deg")  # degree sign, ordinal sign
    s = unicodedata.normalize("NFKC", s).strip()
    if len(s) >= 2 and s[0] + s[-1] in ("[]", "()", "{}"):
        s = s[1:-1].strip()
    s = s.replace("\u03bc", "u").replace("\u00b5", "u")  # Greek mu, micro sign
    s = re.sub(r"[\s.·⋅*_]", "", s)
    s = s.replace("−", "-").replace("^", "")
    return s


def _build_index() -> tuple[dict[str, dict[str, str]], dict[str, dict[str, str]]]:
    exact: dict[str, dict[str, str]] = {}
    folded: dict[str, dict[str, str]] = {}
    for dim, table in _TABLE.items():
        ex: dict[str, str] = {}
        fo: dict[str, str] = {}
        for spelling in table:
            k = _key(spelling)
            ex.setdefault(k, spelling)
            if spelling not in _CASE_SENSITIVE:
                prev = fo.setdefault(k.lower(), spelling)
                if table[prev] != table[spelling]:  # pragma: no cover - table sanity
                    raise AssertionError(f"ambiguous unit spellings {prev!r}/{spelling!r}")
        exact[dim] = ex
        folded[dim] = fo
    return exact, folded


_EXACT, _FOLDED = _build_index()


def _lookup(unit: str, dim: str) -> str | None:
    """The table spelling matching ``unit`` in dimension ``dim``, or None."""
    k = _key(unit)
    hit = _EXACT[dim].get(k)
    if hit is not None:
        return hit
    hit = _FOLDED[dim].get(k.lower())
    if hit is not None:
        return hit
    return None


def dimension(quantity: str) -> str:
    """The dimension name of a canonical quantity (e.g. ``"pressure"``)."""
    return _DIMENSION[quantity]


def accepted_units(quantity: str) -> list[str]:
    """The unit spellings accepted for a canonical quantity (for messages and ``inspect``)."""
    dim = _DIMENSION[quantity]
    units = [u for u in _TABLE[dim] if quantity == "thc" or u not in ("ppmC", "ppmC1")]
    if quantity == "fuel_mass_flow":
        units += [f"{u} (with [fuel] density_kg_per_m3)" for u in _TABLE["volume_flow"]]
    if quantity == "air_mass_flow":
        units += list(_TABLE["air_volume_flow"]) + list(_TABLE["air_normal_flow"])
    if dim == "pressure":
        units += list(_TABLE["gauge_pressure"])  # gauge: ingest adds the ambient pressure
    return [repr(u) if u == "" else u for u in units]


def unit_dimensions(unit: str) -> list[str]:
    """The dimensions in which ``unit`` is a known spelling (empty list if none)."""
    return [dim for dim in _TABLE if _lookup(unit, dim) is not None]


def is_known_unit(unit: str) -> bool:
    """True when ``unit`` is an accepted spelling of some dimension (used to spot units rows)."""
    return bool(unit_dimensions(unit))


def conversion(
    unit: str,
    quantity: str,
    where: str,
    density_kg_per_m3: float | None = None,
    standard_state: tuple[float, float] | None = None,
) -> Conversion:
    """The linear conversion from ``unit`` to the canonical unit of ``quantity``.

    ``where`` names the place of the unit for messages (a config key or a column).
    ``density_kg_per_m3`` (the fuel density) is needed only for a volumetric fuel flow unit
    such as ``l/min``; ``standard_state`` (degC, kPa) is the reference state of standard
    volume flows of air (``scfm``), default :data:`STANDARD_TEMPERATURE_DEGC`. A basis
    written in the unit (``%vol dry``) is left out here (:func:`split_basis`). Raises
    ConfigError for an unknown unit or one of the wrong dimension, naming the unit, the
    quantity, ``where`` and the accepted spellings.
    """
    if quantity not in _DIMENSION:
        raise ConfigError(f"{where}: unknown quantity '{quantity}'.")
    dim = _DIMENSION[quantity]
    canonical = INPUTS[quantity].unit
    unit = "" if unit is None else str(unit)
    bare, _ = split_basis(unit) if dim == "fraction" else (unit, None)
    hit = _lookup(bare, dim)
    if hit is not None:
        if quantity == "thc" or _key(hit).lower() not in ("ppmc", "ppmc1"):
            scale, offset = _TABLE[dim][hit]
            return Conversion(unit, quantity, scale, offset)
        raise ConfigError(
            f"{where}: unit '{unit}' (ppm of carbon atoms) applies to thc only, not to "
            f"{quantity}; use ppm, % or mol/mol."
        )
    if dim == "pressure" and (g := _lookup(unit, "gauge_pressure")) is not None:
        return Conversion(unit, quantity, _TABLE["gauge_pressure"][g][0], 0.0, gauge=True)
    if quantity == "air_mass_flow":
        for table, default in (("air_volume_flow", standard_state or (
                STANDARD_TEMPERATURE_DEGC, STANDARD_PRESSURE_KPA)),
                ("air_normal_flow", (NORMAL_TEMPERATURE_DEGC, NORMAL_PRESSURE_KPA))):
            v = _lookup(unit, table)
            if v is not None:
                rho = air_density(*default)
                return Conversion(unit, quantity, _TABLE[table][v][0] * rho, 0.0)
    vol = _lookup(unit, "volume_flow")
    if vol is not None and quantity == "fuel_mass_flow":
        if density_kg_per_m3 is None or not density_kg_per_m3 > 0:
            raise ConfigError(
                f"{where}: unit '{unit}' is a volume flow; converting it to a fuel mass flow "
                "needs the fuel density: set density_kg_per_m3 in [fuel]."
            )
        scale = _TABLE["volume_flow"][vol][0] * float(density_kg_per_m3)
        return Conversion(unit, quantity, scale, 0.0)
    accepted = ", ".join(accepted_units(quantity))
    others = [d for d in unit_dimensions(unit) if d != dim]
    if others:
        what = _DIMENSION_NAMES[others[0]]
        reason = f"is {what} unit, but {quantity} needs {_DIMENSION_NAMES[dim]} unit"
        if others[0] == "volume_flow":
            reason += " (only the fuel flow may be given by volume)"
    elif _key(unit).upper() == "MPA":
        reason = "is ambiguous (write MPa for megapascal)"
    else:
        reason = f"is not a known unit for {quantity}"
    raise ConfigError(
        f"{where}: unit '{unit}' {reason} (canonical unit {canonical}). "
        f"Accepted spellings: {accepted}."
    )


def converter(
    unit: str,
    quantity: str,
    where: str,
    density_kg_per_m3: float | None = None,
    standard_state: tuple[float, float] | None = None,
) -> Callable[[np.ndarray], np.ndarray]:
    """A function converting values in ``unit`` to the canonical unit of ``quantity``.

    Same arguments and errors as :func:`conversion` (which also exposes scale and offset).
    """
    return conversion(unit, quantity, where, density_kg_per_m3, standard_state)
