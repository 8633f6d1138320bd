"""Fit the osmotic virial coefficients recorded in planner/data/agents.yaml to handbook freezing points.

Run from the project root: ``.venv/bin/python tests/data/fit_solution_coefficients.py``. It prints, per
agent, the coefficients, the molality range of the data and the largest relative misfit; the numbers in
agents.yaml are these, rounded to four significant digits.

Convention (the one the published coefficients use, [ref:elliott-2007]): a measured freezing-point
depression dT [K] is an osmolality pi = dT / 1.86 K kg/osmol; the fit is of pi against molality m
[mol/kg water]:

- non-electrolytes: pi = m + B m^2 + C m^3;
- NaCl: pi = x + B x^2 + C x^3 with x = k(m) m, k(m) = 2 (1 - A sqrt(m) / (1 + 1.2 sqrt(m))), a
  concentration-dependent dissociation constant of Debye-Hueckel form [ref:pitzer-1973] (A fitted).

Data: CRC Handbook "Concentrative properties of aqueous solutions" [ref:crc-handbook] (NaCl, ethylene
glycol, glycerol, sucrose; the rows used here are those of the 102nd ed. table [ref:crc-handbook-102]),
Lange's Handbook table 5.13 [ref:lange-handbook] (glycerol 50 and 60 %), Clarke 2004 [ref:clarke-2004]
(sucrose 12 %), and for propylene glycol, for which no handbook table was at hand, the Melinder 2010
correlation as implemented in CoolProp [ref:melinder-2010] [ref:coolprop] (so the CoolProp check of
propylene glycol shows the quality of the fit, not an independent test).

After the fits it prints the misfit of the CRC 102nd ed. rows that were not fitted (``NOT_FITTED``); the
same rows are the independent checks in tests/test_solution.py. DMSO (B = 0.108 kg/mol, published, from
memory) and trehalose (sucrose's coefficients) are not fitted: no freezing-point table of either was at
hand; the one DMSO point checked is in agents.yaml (``outside_checks``).
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import least_squares

KF = 1.86  # K kg/osmol, the osmometer convention
MOLAR_MASS = {"nacl": 58.443e-3, "glycerol": 92.094e-3, "ethylene-glycol": 62.068e-3,
              "propylene-glycol": 76.095e-3, "sucrose": 342.297e-3}

# (mass percent, freezing-point depression [K])
HANDBOOK = {
    "nacl": [(0.5, 0.30), (1, 0.59), (2, 1.19), (3, 1.79), (4, 2.41), (5, 3.05), (6, 3.70), (7, 4.38),
             (8, 5.08), (9, 5.81), (10, 6.56), (12, 8.18), (14, 9.94), (16, 11.89), (18, 14.04),
             (20, 16.46)],
    "ethylene-glycol": [(1, 0.30), (10, 3.37), (20, 7.93), (40, 23.84), (60, 51.23)],
    "glycerol": [(10, 2.32), (20, 5.46), (40, 15.5), (50, 22.0), (60, 33.6)],
    "sucrose": [(10, 0.63), (12, 0.77), (20, 1.47), (40, 4.45)],
}


# CRC 102nd ed. rows not used in the fits (mass percent, depression [K]), the independent checks
NOT_FITTED = {
    "glycerol": [(2, 0.41), (5, 1.08), (8, 1.81), (16, 4.09), (24, 7.01), (28, 8.77), (32, 10.74),
                 (36, 12.96)],
    "sucrose": [(2, 0.11), (5, 0.29), (15, 1.01), (24, 1.89), (30, 2.64), (34, 3.27), (38, 4.02), (42, 4.93)],
    "ethylene-glycol": [(5, 1.58), (14, 5.01), (28, 13.03), (32, 16.23), (48, 33.3), (52, 38.81),
                        (56, 44.83)],
}


def molality(mass_percent, molar_mass):
    w = np.asarray(mass_percent, dtype=float) / 100.0
    return w / (1.0 - w) / molar_mass


def screened(m, a):
    s = np.sqrt(m)
    return 2.0 * (1.0 - a * s / (1.0 + 1.2 * s)) * m


def fit(name, data, single_b=False):
    pct, dt = np.array(data, dtype=float).T
    m = molality(pct, MOLAR_MASS[name])
    target = dt / KF
    scale = np.maximum(0.01 * dt, 0.01) / KF  # 1 % of the reading, at least 0.01 K

    def model(p):
        if name == "nacl":
            x = screened(m, p[0])
            return x + p[1] * x**2 + p[2] * x**3
        b, c = (p[0], 0.0) if single_b else p
        return m + b * m**2 + c * m**3

    start = [0.3, 0.05, 0.0] if name == "nacl" else ([0.05] if single_b else [0.05, 0.0])
    r = least_squares(lambda p: (model(p) - target) / scale, start)
    misfit = np.max(np.abs(model(r.x) - target) / target)
    print(f"{name}: params={np.array2string(r.x, precision=6)} molality {m.min():.4g}-{m.max():.4g} "
          f"max misfit {100 * misfit:.2f} %")
    return r.x


def not_fitted_misfit(name, params, single_b=False):
    pct, dt = np.array(NOT_FITTED[name], dtype=float).T
    m = molality(pct, MOLAR_MASS[name])
    b, c = (params[0], 0.0) if single_b else params
    model = KF * (m + b * m**2 + c * m**3)
    worst = np.max(np.abs(model - dt))
    print(f"  {name}: CRC 102nd ed. rows not fitted, {pct.min():g}-{pct.max():g} %: largest misfit {worst:.3f} K")


def main() -> None:
    fit("nacl", HANDBOOK["nacl"])
    not_fitted_misfit("ethylene-glycol", fit("ethylene-glycol", HANDBOOK["ethylene-glycol"]))
    not_fitted_misfit("glycerol", fit("glycerol", HANDBOOK["glycerol"]))
    not_fitted_misfit("sucrose", fit("sucrose", HANDBOOK["sucrose"], single_b=True), single_b=True)
    import CoolProp.CoolProp as CP

    pct = np.linspace(5, 60, 12)
    dt = [273.15 - CP.PropsSI("T_freeze", "T", 300, "P", 101325, f"INCOMP::MPG[{p / 100}]") for p in pct]
    fit("propylene-glycol", list(zip(pct, dt, strict=True)))


if __name__ == "__main__":
    main()
