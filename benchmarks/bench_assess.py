"""Benchmark of one assessment: ``assess()`` on each demo protocol, whole and per section. Prints figures.

For each protocol in ``protocols/``:

- ``first``: the first ``assess()`` in this process (tables and caches are built then);
- ``warm``: median of ``--runs`` further calls on the same protocol;
- ``new value``: median over ``--runs`` calls, each on the protocol with its first schedule step's
  temperature moved by a new small amount (what a user changing one number costs: no result can be
  reused from an earlier call on the same input);
- per section: median time of ``planner.sections.<name>.build`` with the context built in
  ``SECTION_ORDER`` (same protocol, warm).

The load average is printed with the figures (the machine may be shared).

Run: ``.venv/bin/python benchmarks/bench_assess.py [--runs N]``.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import statistics
import time
from pathlib import Path

from planner.assessment import SECTION_ORDER, _section_builder, assess
from planner.protocol import load_protocol

ROOT = Path(__file__).resolve().parents[1]


def _timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def _nudged(protocol, delta_k: float):
    """The protocol with its start temperature moved by ``delta_k`` [K] (a new value for every call)."""
    schedule = dataclasses.replace(protocol.schedule,
                                   start_temperature=protocol.schedule.start_temperature + delta_k)
    return dataclasses.replace(protocol, schedule=schedule)


def per_section(protocol, runs: int) -> dict[str, float]:
    times: dict[str, list[float]] = {name: [] for name in SECTION_ORDER}
    for _ in range(runs):
        context = {}
        for name in SECTION_ORDER:
            build = _section_builder(name)
            t0 = time.perf_counter()
            out = build(protocol, context)
            times[name].append(time.perf_counter() - t0)
            if out is not None:
                context[name] = out
    return {name: statistics.median(v) for name, v in times.items()}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5, help="calls per median (default 5)")
    args = parser.parse_args()
    paths = sorted((ROOT / "protocols").glob("*.yaml"))
    print(f"load average before: {' '.join(f'{x:.2f}' for x in os.getloadavg())}  (cores: {os.cpu_count()})")
    rows = []
    for path in paths:
        protocol = load_protocol(path)
        first = _timed(lambda p=protocol: assess(p))
        warm = statistics.median(_timed(lambda p=protocol: assess(p)) for _ in range(args.runs))
        nudged = [_nudged(protocol, 0.0137 * (i + 1)) for i in range(args.runs)]
        new = statistics.median(_timed(lambda p=p: assess(p)) for p in nudged)
        rows.append((path.stem, first, warm, new, per_section(protocol, args.runs)))
    header = f"{'protocol':<24}{'first ms':>10}{'warm ms':>10}{'new value ms':>14}"
    print(header + "".join(f"{name:>14}" for name in SECTION_ORDER))
    for stem, first, warm, new, sections in rows:
        print(f"{stem:<24}{first * 1e3:>10.0f}{warm * 1e3:>10.0f}{new * 1e3:>14.0f}"
              + "".join(f"{sections[name] * 1e3:>14.1f}" for name in SECTION_ORDER))
    print("(section columns: warm median ms of planner.sections.<name>.build, context built in order)")
    print(f"load average after: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
