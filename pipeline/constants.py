"""Physical constants used by every stage, each with its symbol, unit and source.

Molar masses are the values 40 CFR 1065.1005(f) uses in the worked examples of subpart G
(IUPAC 2005-era atomic weights). Values derived from others are computed here, not retyped.
"""

from __future__ import annotations

# --- atomic and molar masses, g/mol -------------------------------------------------------
#: M_C, carbon; 40 CFR 1065.656(d) and 1065.643(c) worked examples.
M_C = 12.0107
#: M_H, hydrogen; 40 CFR 1065.656(d) worked example.
M_H = 1.00794
#: M_O, oxygen; 40 CFR 1065.656(d) worked example.
M_O = 15.9994
#: M_N, nitrogen; 40 CFR 1065.656(d) worked example.
M_N = 14.0067
#: M_S, sulfur; 40 CFR 1065.656(d) worked example.
M_S = 32.065
#: M_Ar, argon; 40 CFR 1065.1005(f) (value from memory, REFERENCES 1.1 [M]).
M_AR = 39.948

M_CO = M_C + M_O  # 28.0101, matches 1065.643(c) example
M_CO2 = M_C + 2 * M_O  # 44.0095, matches 1065.643(c) example
M_H2O = 2 * M_H + M_O  # 18.01528
M_O2 = 2 * M_O
M_N2 = 2 * M_N
M_H2 = 2 * M_H
M_NO = M_N + M_O
#: NOx is always reported as NO2: 46.0055 g/mol, 40 CFR 1065.656(c)(1), 1065.602(l).
M_NO2 = M_N + 2 * M_O
#: THC on a C1 basis, CH1.85: 13.875389 g/mol, 40 CFR 1065.643(c) example.
M_THC_C1 = M_C + 1.85 * M_H

# --- dry air, mol/mol (REFERENCES 1.2; CFR default intake CO2 per 1065.656(c)(3)) -----------
X_O2_AIR_DRY = 0.209445
X_CO2_AIR_DRY = 375e-6
X_AR_AIR_DRY = 0.00934
X_N2_AIR_DRY = 0.78084
#: O2 + CO2 of dry air, the constant of Eq. 1065.655-9 (REFERENCES 1.2/1.4, [C]).
X_O2_PLUS_CO2_AIR_DRY = X_O2_AIR_DRY + X_CO2_AIR_DRY
#: Molar mass of dry air from its composition; 28.96559 g/mol (REFERENCES 1.1 [C]).
M_AIR = (
    X_O2_AIR_DRY * M_O2
    + X_CO2_AIR_DRY * M_CO2
    + X_AR_AIR_DRY * M_AR
    + X_N2_AIR_DRY * M_N2
)

#: Water-gas equilibrium constant K = x_CO x_H2O / (x_CO2 x_H2); 40 CFR 86.345-79, and the
#: 3.5 of the Brettschneider equation and 40 CFR 1065.655.
K_WATER_GAS = 3.5

#: Molar gas constant, J/(mol K); 40 CFR 1065.602(l) example.
R_GAS = 8.314472

#: Standard atmosphere, kPa.
P_STD_KPA = 101.325

#: Scale factor from the median absolute deviation to the standard deviation of a normal
#: sample, 1 / Phi^-1(3/4) = 1.4826 (Rousseeuw & Croux 1993, J. Am. Stat. Assoc. 88:1273).
MAD_TO_SIGMA = 1.4826
