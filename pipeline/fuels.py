"""Fuel composition and the stoichiometry that follows from it.

A fuel is described per carbon atom as CH_alpha O_beta S_gamma N_delta (40 CFR 1065.655(d),
1065.656(d) symbol list). Everything else (carbon mass fraction, stoichiometric oxygen and
air demand) is derived from those ratios. Fuels without carbon (hydrogen, ammonia;
1065.656(e)) have ``c = 0`` and their ratios are then atoms per formula unit (H2: h_c = 2).
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from importlib import resources

from . import constants as C

PRESETS_RESOURCE = "fuels.toml"


@dataclass(frozen=True)
class Fuel:
    """A fuel as atomic ratios per carbon atom.

    Attributes
    ----------
    name: preset name or ``"custom"``.
    h_c, o_c, s_c, n_c: atomic H/C (alpha), O/C (beta), S/C (gamma), N/C (delta); for a fuel
        without carbon (``c = 0``) the atoms of H, O, S, N per formula unit.
    c: carbon atoms per formula unit: 1 for every carbon fuel (the per-carbon description of
        1065.655), 0 for hydrogen and ammonia.
    lhv_MJ_per_kg: optional lower heating value, MJ/kg (informative only).
    density_kg_per_m3: optional liquid density, kg/m^3 (for volumetric fuel meters).
    source: where the composition comes from.
    """

    name: str
    h_c: float
    o_c: float = 0.0
    s_c: float = 0.0
    n_c: float = 0.0
    c: float = 1.0
    lhv_MJ_per_kg: float | None = None
    density_kg_per_m3: float | None = None
    source: str = ""
    description: str = ""

    @property
    def has_carbon(self) -> bool:
        """False for hydrogen and ammonia: no carbon balance is possible."""
        return self.c > 0

    @property
    def molar_mass_per_c(self) -> float:
        """Mass of fuel per mole of fuel carbon (per formula unit if c = 0), g/mol.

        D = M_C + alpha M_H + beta M_O + gamma M_S + delta M_N (REFERENCES 1.3, reproduces
        the 40 CFR 1065.656(d)(2) example).
        """
        return (
            self.c * C.M_C
            + self.h_c * C.M_H
            + self.o_c * C.M_O
            + self.s_c * C.M_S
            + self.n_c * C.M_N
        )

    @property
    def w_c(self) -> float:
        """Carbon mass fraction w_C = M_C / D, g/g (40 CFR 1065.656(d))."""
        return self.c * C.M_C / self.molar_mass_per_c

    @property
    def w_h(self) -> float:
        """Hydrogen mass fraction w_H = alpha M_H / D, g/g (40 CFR 1065.656(d))."""
        return self.h_c * C.M_H / self.molar_mass_per_c

    @property
    def w_o(self) -> float:
        """Oxygen mass fraction w_O = beta M_O / D, g/g (40 CFR 1065.656(d))."""
        return self.o_c * C.M_O / self.molar_mass_per_c

    @property
    def w_s(self) -> float:
        """Sulfur mass fraction, g/g (40 CFR 1065.656(d))."""
        return self.s_c * C.M_S / self.molar_mass_per_c

    @property
    def w_n(self) -> float:
        """Nitrogen mass fraction, g/g (40 CFR 1065.656(d))."""
        return self.n_c * C.M_N / self.molar_mass_per_c

    @property
    def o2_stoich_per_c(self) -> float:
        """Moles of O2 needed to burn one mole of fuel carbon completely: 1 + a/4 - b/2 + g.

        Complete combustion to CO2, H2O and SO2 (sulfur as SO2, fuel nitrogen to N2); the
        same factor appears in Eq. 1065.655-7 and the Brettschneider denominator. Per formula
        unit for a fuel without carbon (H2: 0.5).
        """
        return self.c + self.h_c / 4.0 - self.o_c / 2.0 + self.s_c

    @property
    def afr_stoich(self) -> float:
        """Stoichiometric dry-air/fuel mass ratio, kg dry air per kg fuel.

        AFR_st = (1 + a/4 - b/2 + g) M_air / (x_O2,air,dry D), with the CFR dry air of
        REFERENCES 1.2 (x_O2 = 0.209445, M_air = 28.96559 g/mol); REFERENCES 5 [D].
        """
        return self.o2_stoich_per_c * C.M_AIR / (C.X_O2_AIR_DRY * self.molar_mass_per_c)

    def properties(self) -> dict[str, float | str]:
        """The fuel properties used by a run, for the result file and the console."""
        out: dict[str, float | str] = {
            "name": self.name,
            "h_c": self.h_c,
            "o_c": self.o_c,
            "s_c": self.s_c,
            "n_c": self.n_c,
            "c": self.c,
            "w_c": self.w_c,
            "w_h": self.w_h,
            "w_o": self.w_o,
            "molar_mass_per_c_g_per_mol": self.molar_mass_per_c,
            "o2_stoich_per_c": self.o2_stoich_per_c,
            "afr_stoich_dry_air": self.afr_stoich,
            "source": self.source,
        }
        if self.lhv_MJ_per_kg is not None:
            out["lhv_MJ_per_kg"] = self.lhv_MJ_per_kg
        if self.density_kg_per_m3 is not None:
            out["density_kg_per_m3"] = self.density_kg_per_m3
        return out


def fuel_from_mass_fractions(
    name: str, w_c: float, w_h: float, w_o: float = 0.0, w_s: float = 0.0, w_n: float = 0.0
) -> Fuel:
    """Fuel from measured mass fractions: alpha = (M_C/M_H)(w_H/w_C), etc. (REFERENCES 1.3 [C]).

    With w_C = 0 the fuel has no carbon and the ratios are atoms per formula unit, scaled to
    one N atom when nitrogen is present (ammonia, NH3) and to two H atoms otherwise (H2).
    """
    if w_c < 0 or w_h < 0:
        raise ValueError(f"fuel {name!r}: mass fractions must not be negative")
    if w_c == 0:
        # No carbon: atoms per formula unit, scaled to one N (ammonia-like) or two H.
        per_g = {"h": w_h / C.M_H, "o": w_o / C.M_O, "s": w_s / C.M_S, "n": w_n / C.M_N}
        unit = per_g["n"] if per_g["n"] > 0 else per_g["h"] / 2.0
        if unit <= 0:
            raise ValueError(f"fuel {name!r}: no carbon, hydrogen or nitrogen")
        return Fuel(
            name=name, c=0.0, h_c=per_g["h"] / unit, o_c=per_g["o"] / unit,
            s_c=per_g["s"] / unit, n_c=per_g["n"] / unit, source="mass fractions",
        )
    return Fuel(
        name=name,
        h_c=(C.M_C / C.M_H) * (w_h / w_c),
        o_c=(C.M_C / C.M_O) * (w_o / w_c),
        s_c=(C.M_C / C.M_S) * (w_s / w_c),
        n_c=(C.M_C / C.M_N) * (w_n / w_c),
        source="mass fractions",
    )


def blend_by_mass(name: str, parts: dict[Fuel, float] | list[tuple[Fuel, float]]) -> Fuel:
    """A blend of fuels (or fluids) by mass share, 40 CFR 1065.656(d)(3).

    The mass fractions of C, H, O, S, N are mixed by mass (w_X,mix = sum m_j w_Xj / sum m_j)
    and the atomic ratios of the mixture follow from the mixed fractions (REFERENCES 1.3,
    [V-ex]: reproduces the CFR diesel + NH3 example).
    """
    items = list(parts.items()) if isinstance(parts, dict) else list(parts)
    total = sum(m for _, m in items)
    if total <= 0 or any(m < 0 for _, m in items):
        raise ValueError(f"blend {name!r}: mass shares must be >= 0 with a positive sum")

    def mix(attr: str) -> float:
        return sum(getattr(f, attr) * m for f, m in items) / total

    fuel = fuel_from_mass_fractions(
        name, mix("w_c"), mix("w_h"), mix("w_o"), mix("w_s"), mix("w_n")
    )
    desc = " + ".join(f"{m / total:.4g} {f.name}" for f, m in items)
    return Fuel(
        name=name, h_c=fuel.h_c, o_c=fuel.o_c, s_c=fuel.s_c, n_c=fuel.n_c, c=fuel.c,
        source=f"blend by mass (40 CFR 1065.656(d)(3)): {desc}", description=f"blend: {desc}",
    )


def load_presets() -> dict[str, Fuel]:
    """Read the packaged presets (``configs/fuels.toml`` links to the same file)."""
    text = resources.files("pipeline").joinpath("data", PRESETS_RESOURCE).read_text("utf-8")
    raw = tomllib.loads(text)
    out = {}
    for key, entry in raw.items():
        out[key] = Fuel(
            name=key,
            h_c=float(entry["h_c"]),
            o_c=float(entry.get("o_c", 0.0)),
            s_c=float(entry.get("s_c", 0.0)),
            n_c=float(entry.get("n_c", 0.0)),
            c=float(entry.get("c", 1.0)),
            lhv_MJ_per_kg=entry.get("lhv_MJ_per_kg"),
            density_kg_per_m3=entry.get("density_kg_per_m3"),
            source=str(entry.get("source", "")),
            description=str(entry.get("description", "")),
        )
    return out
