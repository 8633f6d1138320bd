"""Benchmark: the isochoric state over a 200 x 200 grid of (temperature, concentration).

Vectorised planner (planner.isochoric, cached water/ice tables) against a straightforward scalar loop that
calls `iapws` for every density and scipy's brentq for every root, measured side by side in one run. The
scalar loop is timed on a random sample of the grid points and scaled to the whole grid (a full scalar
run takes many minutes); the two results are also compared on that sample.

Solution (invented example): glycerol in isotonic saline, 0.1 to 3 times a 10 % w/w base; fill at 4 C,
0.101325 MPa; temperatures -1 C to -21.9 C. Run: .venv/bin/python benchmarks/bench_isochoric.py
"""

from __future__ import annotations

import os
import time
import warnings

import numpy as np
from iapws._iapws import _Ice, _Melting_Pressure, _Supercooled
from scipy.optimize import brentq

from planner import isochoric as iso
from planner import solution as sol

N = 200
SAMPLE = 60


def scalar_state(t: float, scale: float, comp, fill: iso.Fill) -> tuple[float, float]:
    """(p [Pa], x) by brentq on the pressure residual, each density straight from iapws."""

    def tm(p_pa: float) -> float:
        return brentq(lambda tt: _Melting_Pressure(tt) * 1e6 - p_pa, 251.165, 273.16, xtol=1e-12)

    def cryoscopic(p_pa: float) -> float:
        """T_m^2 / L_f on the melting curve (iapws; G12-15's g is given over R T_LL)."""
        t_m = tm(p_pa)
        liq = _Supercooled(t_m, p_pa / 1e6)
        h_liq = liq["g"] * 0.461523087 * 228.2 + t_m * liq["s"]
        return t_m**2 / (h_liq - _Ice(t_m, p_pa / 1e6)["h"])

    tm0 = tm(fill.pressure)
    k0 = cryoscopic(fill.pressure)
    vs = fill.solute_volume * scale
    cavity = fill.water_volume + vs

    def x_of(p_pa: float) -> float:
        vw = 1.0 / _Supercooled(t, p_pa / 1e6)["rho"]
        vi = 1.0 / _Ice(t, p_pa / 1e6)["rho"]
        return (cavity * (1 + fill.compliance * (p_pa - fill.pressure)) - vs - vw) / (vi - vw)

    def residual(p_pa: float) -> float:
        x = min(max(x_of(p_pa), 0.0), 0.8)
        t_equivalent = tm0 - (tm(p_pa) - t) * k0 / cryoscopic(p_pa)
        return float(sol.osmolality(comp, scale / (1 - x))) - float(
            sol.osmolality_at_freezing_point(min(t_equivalent, 273.15)))

    p_hi = min(_Melting_Pressure(min(t, 273.16)) * 1e6, 208.5e6)
    if residual(fill.pressure) >= 0:
        return float("nan"), 0.0
    p = brentq(residual, fill.pressure, p_hi, xtol=1.0)
    return p, x_of(p)


def main() -> None:
    warnings.simplefilter("ignore")
    comp = sol.composition("isotonic-saline", [("glycerol", "mass_percent", 10.0)])
    v, m = iso.solute_volume_and_mass(comp)
    fill = iso.make_fill(277.15, compliance=2e-11, solute_volume=v, solute_mass=m)
    liquid = iso.liquid_from_composition(comp)
    temps = np.linspace(273.15 - 21.9, 273.15 - 1.0, N)
    scales = np.linspace(0.1, 3.0, N)
    tt, ss = np.meshgrid(temps, scales, indexing="ij")

    iso.isochoric_state(260.0, fill, liquid)  # build the cached tables once (not part of the timing)
    runs = []
    for _ in range(3):
        t0 = time.perf_counter()
        state = iso.isochoric_state(tt, fill, liquid, scale=ss)
        runs.append(time.perf_counter() - t0)
    vector_s = min(runs)

    rng = np.random.default_rng(0)
    idx = rng.choice(tt.size, SAMPLE, replace=False)
    t0 = time.perf_counter()
    ref = [scalar_state(float(tt.flat[i]), float(ss.flat[i]), comp, fill) for i in idx]
    loop_s = (time.perf_counter() - t0) * tt.size / SAMPLE

    p_ref = np.array([r[0] for r in ref])
    x_ref = np.array([r[1] for r in ref])
    frozen = np.isfinite(p_ref)
    dp = np.max(np.abs(state.pressure.flat[idx][frozen] - p_ref[frozen]) / p_ref[frozen])
    dx = np.max(np.abs(state.ice_fraction_of_water.flat[idx][frozen] - x_ref[frozen]))
    print(f"grid {N} x {N} = {tt.size} states (temperature x concentration); "
          f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    print(f"vectorised planner:        {vector_s:.3f} s (best of 3: {', '.join(f'{r:.3f}' for r in runs)})")
    print(f"scalar iapws + brentq:     {loop_s:.1f} s (from {SAMPLE} sampled points)")
    print(f"speed-up:                  {loop_s / vector_s:.0f}x")
    print(f"agreement on the sample:   max |dp/p| = {dp:.2e}, max |dx| = {dx:.2e} ({frozen.sum()} frozen points)")


if __name__ == "__main__":
    main()
