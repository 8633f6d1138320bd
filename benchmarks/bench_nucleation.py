"""Benchmark of the nucleation model: prints figures, asserts nothing.

1. Freeze probability with its 10 000-draw 90 % interval over a 72 h schedule (the bath history of an
   invented demo schedule: ramp from 4 C to -6 C at 0.5 C/min, 72 h hold, ramp back at 1 C/min, sampled
   every 60 s). Target: 50 ms or less.
2. Probability map over 100 volumes x 100 hold temperatures (central estimate). Target: 200 ms or less.
   Also the map of the upper end of the 90 % interval (2000 draws), and the "what would it take" answers.

Run: .venv/bin/python benchmarks/bench_nucleation.py
"""

from __future__ import annotations

import time

import numpy as np

from planner import nucleation as nuc
from planner.protocol import Schedule, Step
from planner.schedule import bath_history

C = 273.15


def best_of(fn, repeat: int = 7) -> float:
    """Fastest wall time of ``repeat`` runs [s] (the first call also warms caches)."""
    fn()
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    schedule = Schedule(C + 4.0, (
        Step(0, "ramp", target_temperature=C - 6.0, rate=0.5 / 60),
        Step(1, "hold", duration=72 * 3600.0),
        Step(2, "ramp", target_temperature=C + 4.0, rate=1.0 / 60),
    ))
    history = bath_history(schedule)
    model = nuc.preset("exposed-interface")
    volume, area = 2e-6, np.pi * 0.005**2

    def headline():
        return nuc.freeze_probability(history.time, history.temperature, volume, model, nuc.PURE_WATER_LIQUIDUS, area)

    r = headline()
    t1 = best_of(headline)
    print(f"history points: {history.time.size}")
    print(f"freeze probability, 72 h schedule, {r.draws} draws: P = {r.probability:.4f}, "
          f"90 % interval {r.interval[0]:.2e} to {r.interval[1]:.3f}")
    print(f"  time: {t1 * 1e3:.1f} ms (target <= 50 ms)")

    vols = np.geomspace(1e-8, 1e-4, 100)
    temps = np.linspace(C - 20.0, C - 0.5, 100)
    areas = area * (vols / volume) ** (2 / 3)

    def central_map():
        return nuc.freeze_probability_map(vols, temps, 72 * 3600.0, model, nuc.PURE_WATER_LIQUIDUS, areas)

    def upper_map():
        return nuc.freeze_probability_map(vols, temps, 72 * 3600.0, model, nuc.PURE_WATER_LIQUIDUS, areas,
                                          quantile=0.95, draws=2000)

    t2 = best_of(central_map)
    t3 = best_of(upper_map, repeat=3)
    print(f"map 100 volumes x 100 hold temperatures (central): {t2 * 1e3:.1f} ms (target <= 200 ms)")
    print(f"map 100 x 100, upper end of the 90 % interval (2000 draws): {t3 * 1e3:.1f} ms")

    def answers():
        return nuc.what_it_takes(history.time, history.temperature, volume, model, 0.01, nuc.PURE_WATER_LIQUIDUS, area)

    t4 = best_of(answers, repeat=3)
    a = answers()
    print(f"what would it take (10 000 draws): {t4 * 1e3:.0f} ms; longest hold "
          f"{(a.longest_hold or 0) / 3600:.3g} h, largest volume {(a.largest_volume or 0) * 1e6:.3g} mL")

    def curve():
        return nuc.cumulative_freeze_probability(history.time, history.temperature, volume, model,
                                                 nuc.PURE_WATER_LIQUIDUS, area, points=200)

    t5 = best_of(curve, repeat=3)
    print(f"cumulative curve, 200 points, 2000 draws: {t5 * 1e3:.0f} ms")


if __name__ == "__main__":
    main()
