"""Benchmark: a three-step cryoprotectant loading simulation (target: 100 ms or less on the lab machine).

Plain script, prints figures; no timed asserts. Invented demo scenario: human sperm (preset), glycerol
added in three equal steps to 1 molal in isotonic saline at 22 C, 10 min per step, non-ideal osmolality.
Also times a Mazur cooling run and the equal-step suggestion, for reference.
"""

from __future__ import annotations

import statistics
import time

from planner import cells as c
from planner.protocol import Cells, Cryoprotectant, Solution


def glycerol(m: float) -> Solution:
    return Solution("isotonic-saline", (Cryoprotectant("glycerol", "molal", m),))


def timed(fn, repeat: int) -> tuple[float, float, float]:
    """(first call, median wall time, median CPU time of this process over ``repeat`` calls) [s].

    On a shared machine the CPU time is the steadier figure; the wall time includes waiting for a core.
    """
    t0 = time.perf_counter()
    fn()
    first = time.perf_counter() - t0
    wall, cpu = [], []
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return first, statistics.median(wall), statistics.median(cpu)


def main() -> None:
    model = c.VirialSolution()
    cell = c.resolve_cell(Cells(preset="human-sperm"))
    steps = [c.PlannedStep("loading", i, glycerol(m), 295.15, 600.0) for i, m in enumerate((1 / 3, 2 / 3, 1.0))]
    first, median, cpu = timed(lambda: c.simulate_steps(cell, steps, model), 20)
    h = c.simulate_steps(cell, steps, model)
    print(f"three-step loading (human sperm, glycerol to 1 molal, 3 x 10 min, virial osmolality): "
          f"first call {first * 1e3:.1f} ms (builds the osmolality table), median of 20: wall {median * 1e3:.1f} ms, "
          f"CPU {cpu * 1e3:.1f} ms; {h.time.size} samples, min volume {h.min_volume_fraction:.4f}, "
          f"max {h.max_volume_fraction:.4f}")

    dilute = c.DiluteSolution()
    first, median, cpu = timed(lambda: c.simulate_steps(cell, steps, dilute), 20)
    print(f"three-step loading, dilute-limit osmolality: first {first * 1e3:.1f} ms, median wall "
          f"{median * 1e3:.1f} ms, CPU {cpu * 1e3:.1f} ms")

    oocyte = c.resolve_cell(Cells(preset="mouse-oocyte", solute_permeability={"dmso": 2e-7}))
    dmso = Solution("isotonic-saline", (Cryoprotectant("dmso", "molal", 1.0),))
    first, median, cpu = timed(lambda: c.cool_with_extracellular_ice(oocyte, model, dmso, 1.0 / 60.0, 232.15), 5)
    print(f"Mazur cooling (mouse oocyte, 1 molal DMSO, 1 C/min to -41 C): first {first * 1e3:.1f} ms, "
          f"median wall {median * 1e3:.1f} ms, CPU {cpu * 1e3:.1f} ms")

    first, median, cpu = timed(lambda: c.suggest_steps(cell, model, glycerol(1.0), 295.15, "unloading"), 2)
    print(f"suggestion (fewest equal dilution steps, human sperm, 1 molal glycerol): first {first * 1e3:.0f} ms, "
          f"median wall {median * 1e3:.0f} ms, CPU {cpu * 1e3:.0f} ms")


if __name__ == "__main__":
    main()
