"""Benchmark: the ``freezing`` section on the slow-freezing demo protocol (target: 3x faster than three
separate enthalpy-method runs; the app's round trip is 300 ms).

``protocols/slow-freeze-dmso.yaml`` (invented demo): 1.8 mL of 10 % DMSO in saline, seeded at -6 C, then
cooled at 1 C/min to -80 C. The section solves the enthalpy method for the nominal surface coefficient and
both ends of its range. Prints, warm, the median and best wall time and the median CPU time of:

- the stacked solve of the three runs (``planner.freezing.enthalpy_freezing_runs``, as the section calls it);
- the same three runs solved one after another (``enthalpy_freezing``);
- the whole section (``planner.sections.freezing.build``, earlier sections built once beforehand);
- the whole ``assess()``;

with the steps and Newton solves of the stacked solve, and the load average (the machine may be shared).
Last, a hard case for the Newton iteration (invented: a 5 mm water sphere from +30 C in a -60 C bath at
h = 1e5 W/(m2 K), 300 s steps, where the previous step's enthalpies are a poor start): its time, Newton
solves and whether every step converged.

Run: ``.venv/bin/python benchmarks/bench_freezing.py [--runs N]``.
"""

from __future__ import annotations

import argparse
import os
import statistics
import time
from pathlib import Path

import planner.freezing as frz
from planner.assessment import SECTION_ORDER, _section_builder, assess
from planner.protocol import load_protocol
from planner.sections import freezing as section

ROOT = Path(__file__).resolve().parents[1]


def timed(fn, repeat: int) -> tuple[float, float, float]:
    """Median and best wall time, and median CPU time of this process [s]."""
    fn()  # warm caches (data files, tables)
    runs, cpu = [], []
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        runs.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return statistics.median(runs), min(runs), statistics.median(cpu)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=9)
    runs = parser.parse_args().runs
    protocol = load_protocol(ROOT / "protocols" / "slow-freeze-dmso.yaml")
    context = {}
    for name in SECTION_ORDER:
        if name == "freezing":
            break
        out = _section_builder(name)(protocol, context)
        if out is not None:
            context[name] = out

    # the exact call the section makes
    calls = []
    stacked = frz.enthalpy_freezing_runs

    def capture(*args, **kwargs):
        calls.append((args, kwargs))
        return stacked(*args, **kwargs)

    frz.enthalpy_freezing_runs = capture
    try:
        section.build(protocol, context)
    finally:
        frz.enthalpy_freezing_runs = stacked
    args, kwargs = calls[0]
    coefficients, stops = args[5], kwargs["stop_at_centre_ice_fraction"]

    def one_by_one():
        for h, stop in zip(coefficients, stops, strict=True):
            single = dict(kwargs, stop_at_centre_ice_fraction=stop)
            frz.enthalpy_freezing(*args[:5], h, *args[6:], **single)

    solves = [0]
    solver = frz.dgtsv

    def counting(*a, **k):
        solves[0] += 1
        return solver(*a, **k)

    frz.dgtsv = counting
    try:
        paths = stacked(*args, **kwargs)
    finally:
        frz.dgtsv = solver
    steps = int(round(paths[0].time[-1] / paths[0].parameters["time_step_s"]))
    print(f"{len(paths)} runs, {paths[0].parameters['n_cells']} shells, {steps} steps of "
          f"{paths[0].parameters['time_step_s']:.2f} s, {solves[0]} Newton solves in the stacked solve; "
          f"load average {os.getloadavg()[0]:.2f}")
    for label, fn in (("stacked solve (3 runs)", lambda: stacked(*args, **kwargs)),
                      ("3 runs one by one", one_by_one),
                      ("freezing section", lambda: section.build(protocol, context)),
                      ("assess()", lambda: assess(protocol))):
        median, best, cpu = timed(fn, runs)
        print(f"{label:24s} wall median {median * 1e3:6.1f} ms, best {best * 1e3:6.1f} ms; "
              f"CPU median {cpu * 1e3:6.1f} ms")

    def hard():
        return frz.enthalpy_freezing("sphere", 0.005, frz.pure_water_medium(), 303.15, 213.15, 1e5, duration=6000.0,
                                     n_cells=24, time_step=300.0)

    solves[0] = 0
    frz.dgtsv = counting
    try:
        path = hard()
    finally:
        frz.dgtsv = solver
    median, best, cpu = timed(hard, runs)
    print(f"{'hard case (20 steps)':24s} wall median {median * 1e3:6.1f} ms, best {best * 1e3:6.1f} ms; "
          f"{solves[0]} Newton solves; flags {[f.code for f in path.flags] or 'none'}")


if __name__ == "__main__":
    main()
