"""Benchmark: thermal solve of a 72 h schedule for a 20 mL cylinder (target: 100 ms or less).

Invented scenario: 20 mL in a 25 mm tube, cooled from 4 C to -4 C at 0.5 C/min, held 72 h, warmed at
1 C/min, in a stirred bath (Bi > 0.1, so the 2-D conduction model). Prints the median of several runs of
(a) the solver alone and (b) the whole ``thermal`` section (three solves: nominal h and both ends of the
range, plus the hold and lag read-outs).

Run: .venv/bin/python benchmarks/bench_thermal.py
"""

import statistics
import time

import numpy as np

from planner import heat_transfer as ht
from planner.protocol import parse_protocol
from planner.schedule import bath_history, segments
from planner.sections import thermal

PROTOCOL = """
schema: coldmargin/protocol-1
title: benchmark scenario (invented)
sample: {volume_ml: 20.0, geometry: cylinder, diameter_mm: 25.0}
container: {kind: open}
solution: {carrier: water}
environment: {heat_transfer: stirred-bath}
schedule:
  start_c: 4.0
  steps:
    - {ramp_to_c: -4.0, rate_c_per_min: 0.5}
    - {hold_h: 72}
    - {ramp_to_c: 4.0, rate_c_per_min: 1.0}
"""


def timed(fn, repeat: int) -> tuple[float, float, float]:
    """Median and best wall time, and median CPU time of this process [s] (the machine may be shared)."""
    fn()  # warm caches (data files, imports)
    runs, cpu = [], []
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        runs.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return statistics.median(runs), min(runs), statistics.median(cpu)


def main() -> None:
    protocol = parse_protocol(PROTOCOL, "benchmark")
    body = thermal.body_of(protocol.sample)
    material = ht.liquid_water(269.15)
    bath = bath_history(protocol.schedule)
    knots = [0.0] + [s.t_end for s in segments(protocol.schedule)]
    preset = ht.environment_preset("stirred-bath")

    def solve_only():
        out_t = ht.refined_times(knots, 60.0)
        return ht.solve(body, material, bath.time, bath.temperature, preset.h_nominal, output_time=out_t,
                        cells=thermal.CELLS)

    hist = solve_only()
    print(f"20 mL cylinder, {bath.duration / 3600:.1f} h schedule, {hist.time.size} output times, "
          f"{hist.temperature.shape[1]} grid points, model {hist.model}")
    median, best, cpu = timed(solve_only, 15)
    print(f"solve (one h):         wall median {median * 1e3:6.1f} ms, best {best * 1e3:6.1f} ms; "
          f"CPU median {cpu * 1e3:6.1f} ms   (target <= 100 ms)")
    median, best, cpu = timed(lambda: thermal.build(protocol, {}), 7)
    print(f"thermal section (3 h): wall median {median * 1e3:6.1f} ms, best {best * 1e3:6.1f} ms; "
          f"CPU median {cpu * 1e3:6.1f} ms")
    rep = thermal.build(protocol, {}).report
    print(f"max lag {rep.max_lag_k:.3f} K, within 0.5 K of the hold after {rep.time_to_within_0p5k_min} min, "
          f"Bi = {rep.biot_number}")
    np.testing.assert_array_less(0, hist.time.size)


if __name__ == "__main__":
    main()
