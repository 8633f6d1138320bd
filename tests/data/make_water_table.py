"""Print the liquid-water property rows of planner/data/heat_transfer.yaml (water_properties.rows).

Density and isobaric heat capacity at 0.101325 MPa: the supercooled-water guideline IAPWS G12-15 below
0 C [ref:iapws-g12-15], IAPWS-95 at and above 0 C [ref:iapws-95]; thermal conductivity: the IAPWS 2011
formulation [ref:iapws-r15-11] evaluated at that density. All through the `iapws` package
[ref:iapws-python]. Run: .venv/bin/python tests/data/make_water_table.py
"""

import warnings

import iapws
from iapws._iapws import _Supercooled, _ThCond

P_MPA = 0.101325


def row(celsius: int) -> tuple[int, float, float, float]:
    temperature = celsius + 273.15
    if celsius < 0:
        state = _Supercooled(temperature, P_MPA)
        rho, cp = float(state["rho"]), float(state["cp"]) * 1000.0
    else:
        water = iapws.IAPWS95(T=temperature, P=P_MPA)
        rho, cp = water.rho, water.cp * 1000.0
    k = _ThCond(rho, temperature)
    return celsius, round(rho, 2), round(cp, 1), round(k, 4)


if __name__ == "__main__":
    warnings.simplefilter("ignore")
    for c in range(-30, 41, 5):
        celsius, rho, cp, k = row(c)
        print(f"    - [{celsius}, {rho:.2f}, {cp:.1f}, {k:.4f}]")
