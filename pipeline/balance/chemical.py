"""Carbon-based chemical balance of fuel, intake air and raw exhaust (40 CFR 1065.655(c)).

The equation system is REFERENCES 1.4 (written from memory and checked by closure against an
independent stoichiometric forward model, tag [C]); lambda follows from it by REFERENCES 1.6
([D], our derivation, not stated in the CFR). The O2 analyzer is not used.

Solved by fixed-point iteration, vectorised over all samples, in the order of REFERENCES 1.4:
dry conversion (Eqs. 14-18) -> (3) -> (4) -> (7) -> (8) -> (5) -> (1) -> (2) -> (6).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .. import constants as C
from ..fuels import Fuel

Array = NDArray[np.float64]

#: Iteration stops when every sample's water and excess-air fractions change by less than
#: this (absolute, mol/mol) between passes; far tighter than the CFR rule (+-1 % or
#: +-1 umol/mol, 1065.656(c)(2)).
TOLERANCE = 1e-12
MAX_ITERATIONS = 200


@dataclass(frozen=True)
class ChemicalBalance:
    """Solution of the chemical balance, one value per sample (mol/mol unless noted).

    Symbols follow 40 CFR 1065.655 / 1065.656(c)(3): ``x_h2o_exh`` water per mole wet
    exhaust; ``x_h2o_exhdry`` water per mole dry exhaust; ``x_ccombdry`` fuel carbon per
    mole dry exhaust; ``x_int_exhdry`` intake air needed for the actual combustion products per
    mole dry exhaust; ``x_dil_exhdry`` excess air per mole dry exhaust; ``x_raw_exhdry``
    undiluted exhaust without excess air per mole dry exhaust; ``x_h2_dry`` H2 (estimated by
    the water-gas relation unless measured); ``x_o2_int`` O2 per mole wet intake air;
    ``dry`` the analyzer readings converted to a dry basis; ``lambda_`` excess-air ratio
    (REFERENCES 1.6); ``iterations`` passes used.
    """

    lambda_: Array
    x_h2o_exh: Array
    x_h2o_exhdry: Array
    x_ccombdry: Array
    x_int_exhdry: Array
    x_dil_exhdry: Array
    x_raw_exhdry: Array
    x_h2_dry: Array
    x_o2_int: Array
    x_co2_int: Array
    dry: dict[str, Array]
    iterations: int


def _arr(x: ArrayLike | None, n: int) -> Array:
    if x is None:
        return np.zeros(n)
    a = np.asarray(x, dtype=float)
    return np.broadcast_to(a, (n,)).astype(float) if a.shape != (n,) else a


def chemical_balance(
    fuel: Fuel,
    co2: ArrayLike,
    co: ArrayLike | None = None,
    thc: ArrayLike | None = None,
    no: ArrayLike | None = None,
    no2: ArrayLike | None = None,
    h2: ArrayLike | None = None,
    *,
    x_h2o_int: ArrayLike = 0.0,
    basis: Mapping[str, str] | None = None,
    x_h2o_dryer: ArrayLike = 0.0,
    x_co2_int_dry: float = C.X_CO2_AIR_DRY,
    k_water_gas: float = C.K_WATER_GAS,
) -> ChemicalBalance:
    """Solve the 1065.655 chemical balance for raw exhaust, vectorised.

    Parameters
    ----------
    fuel: fuel composition (alpha, beta, gamma, delta).
    co2, co, thc, no, no2, h2: analyzer readings in mol/mol (THC on a C1 basis); None means
        not measured (zero; H2 None means "estimate from the water-gas relation", Eq. 4).
    x_h2o_int: water mole fraction of the intake air (wet).
    basis: per species ``"dry"`` or ``"wet"`` (default: all dry except ``thc`` wet, the usual
        hot FID). Dry means measured after a chiller/dryer that leaves ``x_h2o_dryer`` of
        water in the sample; wet means at the exhaust water content (part of the iteration).
    x_h2o_dryer: water mole fraction left in the sample of dry-basis analyzers (e.g. from the
        chiller outlet dew point, 40 CFR 1065.645/1065.659). Where it exceeds the exhaust
        water (no condensation), the exhaust water is used instead.
    x_co2_int_dry: dry intake-air CO2 (default 375 umol/mol, 1065.655; 1065.643(b)).
    k_water_gas: water-gas equilibrium constant (3.5).

    Raw exhaust: the excess air has intake composition, so x_CO2dil = x_CO2int and
    x_H2Odil = x_H2Oint (40 CFR 1065.643(b)(2)).
    """
    co2 = np.asarray(co2, dtype=float)
    n = co2.shape[0] if co2.ndim else 1
    co2 = _arr(co2, n)
    co, thc, no, no2 = (_arr(v, n) for v in (co, thc, no, no2))
    h2_measured = h2 is not None
    h2_in = _arr(h2, n)
    x_h2o_int = _arr(x_h2o_int, n)
    x_h2o_dryer = _arr(x_h2o_dryer, n)
    bases = {"co2": "dry", "co": "dry", "thc": "wet", "no": "dry", "no2": "dry", "h2": "dry"}
    if basis:
        bases.update(basis)
    meas = {"co2": co2, "co": co, "thc": thc, "no": no, "no2": no2, "h2": h2_in}

    a, b, g, d = fuel.h_c, fuel.o_c, fuel.s_c, fuel.n_c
    # Eqs. (9)-(13): intake (= dilution) air composition on a wet basis.
    x_h2o_intdry = x_h2o_int / (1.0 - x_h2o_int)  # (11)
    x_o2_int = (C.X_O2_PLUS_CO2_AIR_DRY - x_co2_int_dry) / (1.0 + x_h2o_intdry)  # (9)
    x_co2_int = x_co2_int_dry / (1.0 + x_h2o_intdry)  # (10)
    x_co2_dil, x_h2o_dil = x_co2_int, x_h2o_int  # (12), (13) for raw exhaust

    # Initial guesses (REFERENCES 1.4): exhaust water ~ 2x intake water plus combustion water
    # roughly from carbon; excess air 0.8 of the exhaust.
    x_h2o_exh = np.clip(2 * x_h2o_int + 0.5 * a * co2, 0.0, 0.5)
    x_dil_exh = np.full(n, 0.8)
    x_int_exhdry = np.zeros(n)
    dry: dict[str, Array] = {}
    it = 0
    while it < MAX_ITERATIONS:
        it += 1
        # (14-18) dry conversion with the water at each analyzer.
        water_dry_analyzer = np.minimum(x_h2o_dryer, x_h2o_exh)
        for name, x in meas.items():
            w = x_h2o_exh if bases[name] == "wet" else water_dry_analyzer
            dry[name] = x / (1.0 - w)
        x_h2o_exhdry = x_h2o_exh / (1.0 - x_h2o_exh)
        x_dil_exhdry = x_dil_exh / (1.0 - x_h2o_exh)  # (6)
        # (3) carbon from fuel per mole dry exhaust.
        x_ccombdry = (
            dry["co2"] + dry["co"] + dry["thc"]
            - x_co2_dil * x_dil_exhdry
            - x_co2_int * x_int_exhdry
        )
        # (4) H2 from the water-gas relation unless measured.
        if h2_measured:
            x_h2_dry = dry["h2"]
        else:
            with np.errstate(divide="ignore", invalid="ignore"):
                x_h2_dry = (
                    dry["co"]
                    * (x_h2o_exhdry - x_h2o_dil * x_dil_exhdry)
                    / (k_water_gas * (dry["co2"] - x_co2_dil * x_dil_exhdry))
                )
        burned = x_ccombdry - dry["thc"]
        # (7) intake air for the combustion products.
        x_int_exhdry = (
            (2 + a / 2 - b + 2 * g) * burned
            - (dry["co"] - dry["no"] - 2 * dry["no2"] + x_h2_dry)
        ) / (2 * x_o2_int)
        # (8) raw exhaust without excess air.
        x_raw_exhdry = (
            0.5 * ((a / 2 + b + d) * burned + (2 * dry["thc"] + dry["co"] - dry["no2"] + x_h2_dry))
            + x_int_exhdry
        )
        # (5) water per mole dry exhaust.
        x_h2o_exhdry_new = (
            (a / 2) * burned + x_h2o_dil * x_dil_exhdry + x_h2o_int * x_int_exhdry - x_h2_dry
        )
        x_dil_exh_new = 1.0 - x_raw_exhdry / (1.0 + x_h2o_exhdry_new)  # (1)
        x_h2o_exh_new = x_h2o_exhdry_new / (1.0 + x_h2o_exhdry_new)  # (2)
        with np.errstate(invalid="ignore"):
            change = np.nanmax(
                np.abs(np.concatenate([x_h2o_exh_new - x_h2o_exh, x_dil_exh_new - x_dil_exh])),
                initial=0.0,
            )
        x_h2o_exh, x_dil_exh = x_h2o_exh_new, x_dil_exh_new
        if change < TOLERANCE:
            break

    # Final consistent set with the converged water and excess air.
    x_h2o_exhdry = x_h2o_exh / (1.0 - x_h2o_exh)
    x_dil_exhdry = x_dil_exh / (1.0 - x_h2o_exh)
    # REFERENCES 1.6: total intake air per mole dry exhaust times its O2, over the O2 demand
    # of the burned fuel carbon.
    with np.errstate(divide="ignore", invalid="ignore"):
        lam = (x_int_exhdry + x_dil_exhdry) * x_o2_int / (fuel.o2_stoich_per_c * x_ccombdry)
    return ChemicalBalance(
        lambda_=lam,
        x_h2o_exh=x_h2o_exh,
        x_h2o_exhdry=x_h2o_exhdry,
        x_ccombdry=x_ccombdry,
        x_int_exhdry=x_int_exhdry,
        x_dil_exhdry=x_dil_exhdry,
        x_raw_exhdry=x_raw_exhdry,
        x_h2_dry=x_h2_dry,
        x_o2_int=x_o2_int,
        x_co2_int=x_co2_int,
        dry=dict(dry),
        iterations=it,
    )
