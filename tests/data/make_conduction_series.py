"""Series solutions of transient conduction with a convective surface (the reference for the solver).

A body at uniform temperature T_i meets surroundings at T_inf through a coefficient h from t = 0. The
dimensionless temperature theta = (T - T_inf)/(T_i - T_inf) and the fraction of the initial excess energy
already lost, Q/Q_0, are the classical eigenfunction series (Carslaw & Jaeger 1959, §3.11 slab, §7.6
cylinder, §9.4 sphere; the same forms as Incropera & DeWitt eqs. 5.42, 5.49-5.52)
[ref:carslaw-jaeger-1959] [ref:incropera-dewitt]:

- slab of half-thickness L:  theta = sum C_n exp(-z_n^2 Fo) cos(z_n x/L),  z tan z = Bi,
  C_n = 4 sin z / (2 z + sin 2z),  Q/Q0 = 1 - sum C_n exp(-z^2 Fo) sin z / z;
- infinite cylinder, radius r0:  theta = sum C_n exp(-z^2 Fo) J0(z r/r0),  z J1(z)/J0(z) = Bi,
  C_n = (2/z) J1 / (J0^2 + J1^2),  Q/Q0 = 1 - sum C_n exp(-z^2 Fo) 2 J1(z)/z;
- sphere, radius r0:  theta = sum C_n exp(-z^2 Fo) sin(z r*)/(z r*),  1 - z cot z = Bi,
  C_n = 4 (sin z - z cos z) / (2 z - sin 2z),  Q/Q0 = 1 - sum C_n exp(-z^2 Fo) 3 (sin z - z cos z)/z^3;
- finite cylinder (radius r0, height 2L): theta = theta_cylinder(r) * theta_slab(z) (product solution),
  and 1 - Q/Q0 the product of the two (1 - Q/Q0) (Langston's rule for the energy).

Fo = alpha t / length^2, Bi = h length / k with length = L (slab) or r0. 300 terms per series.
Run: .venv/bin/python tests/data/make_conduction_series.py  (writes conduction_series.csv beside it)
"""

import csv
from pathlib import Path

import numpy as np
from scipy.optimize import brentq
from scipy.special import j0, j1, jn_zeros

TERMS = 300


def roots(geometry: str, bi: float) -> np.ndarray:
    """The first TERMS roots of the eigenvalue equation of ``geometry`` at Biot number ``bi``."""
    out = []
    if geometry == "slab":
        for n in range(TERMS):  # one root in (n pi, n pi + pi/2)
            lo, hi = n * np.pi + 1e-12, n * np.pi + np.pi / 2 - 1e-12
            out.append(brentq(lambda z: z * np.sin(z) - bi * np.cos(z), lo, hi, xtol=1e-15))
    elif geometry == "cylinder":
        zeros0 = np.concatenate(([0.0], jn_zeros(1, TERMS)))  # roots lie between successive zeros of J1... J0
        zj0 = jn_zeros(0, TERMS)
        for n in range(TERMS):  # root between the n-th zero of J1 (or 0) and the n-th zero of J0
            lo, hi = zeros0[n] + 1e-12, zj0[n] - 1e-12
            out.append(brentq(lambda z: z * j1(z) - bi * j0(z), lo, hi, xtol=1e-15))
    else:  # sphere: one root in (n pi, (n+1) pi)
        for n in range(TERMS):
            lo, hi = n * np.pi + 1e-9, (n + 1) * np.pi - 1e-9
            out.append(brentq(lambda z: (1 - bi) * np.sin(z) - z * np.cos(z), lo, hi, xtol=1e-15))
    return np.asarray(out)


def coefficients(geometry: str, z: np.ndarray) -> np.ndarray:
    if geometry == "slab":
        return 4 * np.sin(z) / (2 * z + np.sin(2 * z))
    if geometry == "cylinder":
        return 2 / z * j1(z) / (j0(z) ** 2 + j1(z) ** 2)
    return 4 * (np.sin(z) - z * np.cos(z)) / (2 * z - np.sin(2 * z))


def theta(geometry: str, bi: float, fo: float, position: float) -> float:
    """Dimensionless temperature at relative position 0 (centre) .. 1 (surface)."""
    z = roots(geometry, bi)
    c = coefficients(geometry, z)
    decay = np.exp(-z * z * fo)
    if geometry == "slab":
        shape = np.cos(z * position)
    elif geometry == "cylinder":
        shape = j0(z * position)
    else:
        shape = np.ones_like(z) if position == 0 else np.sin(z * position) / (z * position)
    return float(np.sum(c * decay * shape))


def energy_fraction(geometry: str, bi: float, fo: float) -> float:
    """Q/Q0: share of the initial excess energy lost by Fo."""
    z = roots(geometry, bi)
    c = coefficients(geometry, z)
    decay = np.exp(-z * z * fo)
    if geometry == "slab":
        weight = np.sin(z) / z
    elif geometry == "cylinder":
        weight = 2 * j1(z) / z
    else:
        weight = 3 * (np.sin(z) - z * np.cos(z)) / z**3
    return float(1 - np.sum(c * decay * weight))


# cases: geometry, Bi, Fo (for the finite cylinder: radius Bi and Fo; height/diameter ratio 1.5)
CASES = [
    (geometry, bi, fo)
    for geometry in ("slab", "cylinder", "sphere")
    for bi in (0.1, 1.0, 10.0)
    for fo in (0.05, 0.2, 0.5, 1.0)
]
FINITE = [(bi, fo) for bi in (0.5, 2.0) for fo in (0.05, 0.2, 0.5)]
ASPECT = 1.5  # height / diameter of the finite cylinder


def main() -> None:
    rows = []
    for geometry, bi, fo in CASES:
        rows.append({
            "geometry": geometry, "aspect": "", "bi": bi, "fo": fo,
            "theta_centre": theta(geometry, bi, fo, 0.0), "theta_surface": theta(geometry, bi, fo, 1.0),
            "energy_fraction": energy_fraction(geometry, bi, fo),
        })
    for bi, fo in FINITE:
        # half-height L = ASPECT * r0; slab numbers on L: Bi_z = Bi * L/r0, Fo_z = Fo * (r0/L)^2
        bi_z, fo_z = bi * ASPECT, fo / ASPECT**2
        rows.append({
            "geometry": "finite-cylinder", "aspect": ASPECT, "bi": bi, "fo": fo,
            "theta_centre": theta("cylinder", bi, fo, 0.0) * theta("slab", bi_z, fo_z, 0.0),
            "theta_surface": theta("cylinder", bi, fo, 1.0) * theta("slab", bi_z, fo_z, 0.0),
            "energy_fraction": 1 - (1 - energy_fraction("cylinder", bi, fo)) * (1 - energy_fraction("slab", bi_z, fo_z)),
        })
    path = Path(__file__).with_name("conduction_series.csv")
    with path.open("w", newline="") as f:
        w = csv.DictWriter(f, fieldnames=list(rows[0]))
        w.writeheader()
        for r in rows:
            w.writerow({k: (f"{v:.10g}" if isinstance(v, float) else v) for k, v in r.items()})
    print(f"wrote {len(rows)} rows to {path}")


if __name__ == "__main__":
    main()
