"""Regenerate tests/data/isochoric_pure_water.csv: pure water in a rigid chamber, straight from `iapws`.

For each temperature the pressure is the IAPWS R14-08 melting pressure [ref:iapws-r14-08]
(`iapws._iapws._Melting_Pressure`); liquid and ice densities at (T, p) come from IAPWS G12-15
[ref:iapws-g12-15] (`_Supercooled`) and IAPWS R10-06 [ref:iapws-r10-06] (`_Ice`), and, as a second liquid
reference, IAPWS-95 [ref:iapws-95] (`IAPWS95`), all through the `iapws` package [ref:iapws-python]. The
ice fraction of the water follows from the mass and volume balance per kg of water filled at 0 C and
0.101325 MPa, x = (v0 (1 + beta (p - p0)) - v_w)/(v_i - v_w), for an ideally rigid cavity (beta = 0) and for
beta = 1.5e-11 1/Pa. Run: .venv/bin/python tests/data/make_isochoric_reference.py
"""

import csv
import warnings
from pathlib import Path

import iapws
from iapws._iapws import _Ice, _Melting_Pressure, _Supercooled

FILL_T, FILL_P_MPA = 273.15, 0.101325
BETA = 1.5e-11  # 1/Pa
OUT = Path(__file__).with_name("isochoric_pure_water.csv")


def rows():
    v0 = 1.0 / _Supercooled(FILL_T, FILL_P_MPA)["rho"]
    v0_95 = 1.0 / iapws.IAPWS95(T=FILL_T, P=FILL_P_MPA).rho
    for milli in range(-21900, 0, 300):
        celsius = milli / 1000.0
        t = celsius + 273.15
        p_mpa = _Melting_Pressure(t)
        vw = 1.0 / _Supercooled(t, p_mpa)["rho"]
        vi = 1.0 / _Ice(t, p_mpa)["rho"]
        vw95 = 1.0 / iapws.IAPWS95(T=t, P=p_mpa).rho
        dp = (p_mpa - FILL_P_MPA) * 1e6
        yield {
            "temperature_k": f"{t:.3f}",
            "pressure_pa": f"{p_mpa * 1e6:.6e}",
            "v_water_m3_per_kg": f"{vw:.10e}",
            "v_ice_m3_per_kg": f"{vi:.10e}",
            "ice_fraction_rigid": f"{(v0 - vw) / (vi - vw):.8f}",
            "ice_fraction_compliant": f"{(v0 * (1 + BETA * dp) - vw) / (vi - vw):.8f}",
            "ice_fraction_rigid_iapws95": f"{(v0_95 - vw95) / (vi - vw95):.8f}",
        }


if __name__ == "__main__":
    warnings.simplefilter("ignore")
    data = list(rows())
    with OUT.open("w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(data[0]))
        w.writeheader()
        w.writerows(data)
    print(f"wrote {len(data)} rows to {OUT}")
