"""Water in air and exhaust: vapour pressure, humidity conversions, dew point.

Sources
-------
- 40 CFR 1065.645 (amount of water in an ideal gas): vapour pressure over liquid water from
  Goff (1957) and over ice; x_H2O from dew point and from relative humidity
  (REFERENCES 1.8; equation [V-ex], reproduces the CFR examples 9.5 degC -> 1.186581 kPa,
  20 degC -> 2.3371 kPa; ice form [M]).
- IAPWS R7-97(2012), IF97 region 4, Eq. 30 (saturation pressure) and Eq. 31 (saturation
  temperature) (REFERENCES 6.1; reproduces the IAPWS verification values).
- ISO 8178-1 / NOx Technical Code absolute humidity in g/kg dry air (REFERENCES 4.1 [S]);
  here with the CFR molar masses instead of the rounded 0.622 / 1.608.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .. import constants as C

_T_TRIPLE = 273.16


def p_sat_water_cfr_kPa(t_degC: ArrayLike) -> NDArray[np.float64]:
    """Saturation vapour pressure of water, kPa, by 40 CFR 1065.645 (Goff 1957).

    Over liquid water for t >= 0 degC (valid 0-100 degC, and supercooled water); over ice for
    t < 0 degC (REFERENCES 1.8, ice form [M])::

        log10(p/kPa) = 10.79574 (1 - 273.16/T) - 5.02800 log10(T/273.16)
                       + 1.50475e-4 (1 - 10^(-8.2969 (T/273.16 - 1)))
                       + 0.42873e-3 (10^(4.76955 (1 - 273.16/T)) - 1) - 0.2138602
    """
    t = np.asarray(t_degC, dtype=float)
    T = t + 273.15
    water = (
        10.79574 * (1 - _T_TRIPLE / T)
        - 5.02800 * np.log10(T / _T_TRIPLE)
        + 1.50475e-4 * (1 - 10 ** (-8.2969 * (T / _T_TRIPLE - 1)))
        + 0.42873e-3 * (10 ** (4.76955 * (1 - _T_TRIPLE / T)) - 1)
        - 0.2138602
    )
    ice = (
        -9.096853 * (_T_TRIPLE / T - 1)
        - 3.566506 * np.log10(_T_TRIPLE / T)
        + 0.876812 * (1 - T / _T_TRIPLE)
        - 0.2138602
    )
    return 10 ** np.where(t >= 0.0, water, ice)


# IAPWS-IF97 region 4 coefficients n1..n10 (IAPWS R7-97(2012), Table 34).
_N = (
    0.11670521452767e4,
    -0.72421316703206e6,
    -0.17073846940092e2,
    0.12020824702470e5,
    -0.32325550322333e7,
    0.14915108613530e2,
    -0.48232657361591e4,
    0.40511340542057e6,
    -0.23855557567849,
    0.65017534844798e3,
)


def p_sat_water_if97_kPa(t_degC: ArrayLike) -> NDArray[np.float64]:
    """Saturation pressure of water, kPa, IAPWS-IF97 Eq. 30 (valid 273.15-647.096 K).

    Outside the validity range the result is NaN.
    """
    n1, n2, n3, n4, n5, n6, n7, n8, n9, n10 = _N
    T = np.asarray(t_degC, dtype=float) + 273.15
    theta = T + n9 / (T - n10)
    A = theta**2 + n1 * theta + n2
    B = n3 * theta**2 + n4 * theta + n5
    Cc = n6 * theta**2 + n7 * theta + n8
    p_MPa = (2 * Cc / (-B + np.sqrt(B**2 - 4 * A * Cc))) ** 4
    ok = (T >= 273.15) & (T <= 647.096)
    return np.where(ok, p_MPa * 1000.0, np.nan)


def t_sat_water_if97_degC(p_kPa: ArrayLike) -> NDArray[np.float64]:
    """Saturation temperature of water, degC, IAPWS-IF97 Eq. 31 (backward equation).

    Valid 611.213 Pa <= p <= 22.064 MPa; outside, NaN. This is the dew point of a gas whose
    water partial pressure is ``p_kPa`` (above 0 degC).
    """
    n1, n2, n3, n4, n5, n6, n7, n8, n9, n10 = _N
    p = np.asarray(p_kPa, dtype=float) / 1000.0
    with np.errstate(invalid="ignore", divide="ignore"):
        beta = p**0.25
        E = beta**2 + n3 * beta + n6
        F = n1 * beta**2 + n4 * beta + n7
        G = n2 * beta**2 + n5 * beta + n8
        D = 2 * G / (-F - np.sqrt(F**2 - 4 * E * G))
        T = (n10 + D - np.sqrt((n10 + D) ** 2 - 4 * (n9 + n10 * D))) / 2
    ok = (p >= 611.213e-6) & (p <= 22.064)
    return np.where(ok, T - 273.15, np.nan)


def x_h2o_from_rh(
    rh_percent: ArrayLike, t_degC: ArrayLike, p_kPa: ArrayLike
) -> NDArray[np.float64]:
    """Water mole fraction of moist air from relative humidity, 40 CFR 1065.645(c).

    x_H2O = RH p_H2O(T) / p_abs, with p_H2O from :func:`p_sat_water_cfr_kPa`.
    CFR example: RH 50.77 %, 20 degC, 99.980 kPa -> 0.011868 mol/mol.
    """
    rh = np.asarray(rh_percent, dtype=float) / 100.0
    return rh * p_sat_water_cfr_kPa(t_degC) / np.asarray(p_kPa, dtype=float)


def x_h2o_from_dewpoint(t_dew_degC: ArrayLike, p_kPa: ArrayLike) -> NDArray[np.float64]:
    """Water mole fraction from dew point, 40 CFR 1065.645(b): x_H2O = p_H2O(T_dew) / p_abs.

    CFR example: 9.5 degC, 99.980 kPa -> 0.011868 mol/mol.
    """
    return p_sat_water_cfr_kPa(t_dew_degC) / np.asarray(p_kPa, dtype=float)


def x_h2o_from_g_per_kg(h_g_per_kg: ArrayLike) -> NDArray[np.float64]:
    """Water mole fraction of moist air from absolute humidity H (g water per kg dry air).

    Moles of water per mole dry air are (H/1000) M_air/M_H2O (ISO 8178 / NOx Technical Code
    use the rounded 1.608 for M_air/M_H2O; REFERENCES 4.1); x_H2O = that / (1 + that).
    """
    r = np.asarray(h_g_per_kg, dtype=float) / 1000.0 * C.M_AIR / C.M_H2O
    return r / (1.0 + r)


def dewpoint_from_x_h2o(x_h2o: ArrayLike, p_kPa: ArrayLike) -> NDArray[np.float64]:
    """Dew point (degC) of a gas with water mole fraction ``x_h2o`` at absolute pressure p.

    Water partial pressure x p (Dalton) put into the IAPWS-IF97 saturation-temperature
    equation (REFERENCES 6.1). Below 0 degC (p_H2O < 611.2 Pa) the result is NaN.
    """
    return t_sat_water_if97_degC(np.asarray(x_h2o, dtype=float) * np.asarray(p_kPa, dtype=float))


def dry_air_from_wet(air_wet_kg_h: ArrayLike, x_h2o_int: ArrayLike) -> NDArray[np.float64]:
    """Dry-air mass flow from a meter reading of humid air, kg/h.

    m_dry = m_wet (1 - x) M_air / M_mix, with M_mix = (1 - x) M_air + x M_H2O (REFERENCES 1.6,
    [D]: mass share of dry air in humid air of water mole fraction x).
    """
    x = np.asarray(x_h2o_int, dtype=float)
    m_mix = (1.0 - x) * C.M_AIR + x * C.M_H2O
    return np.asarray(air_wet_kg_h, dtype=float) * (1.0 - x) * C.M_AIR / m_mix
