"""The schedule as the bath (freezer, bath, LN2 vapour) runs it: a piecewise-linear temperature history.

The protocol's steps become segments: a ramp changes the bath temperature at its rate, a hold keeps it,
a plunge is a step change (the sample is moved into another bath), and a seed step is an event at the
current time (ice is started on purpose; the bath carries on). What the sample itself lives through is
the heat-transfer model's business (``planner.heat_transfer``); this module only resolves the program.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from planner.protocol import Schedule


@dataclass(frozen=True)
class Segment:
    """One step of the schedule in time: ``[t_start, t_end]`` [s], bath from ``T_start`` to ``T_end`` [K]."""

    step_index: int
    kind: str  # ramp | hold | plunge | seed
    t_start: float
    t_end: float
    temperature_start: float
    temperature_end: float


@dataclass(frozen=True)
class History:
    """Bath temperature [K] sampled at ``time`` [s]; a plunge shows as two samples at the same time."""

    time: np.ndarray
    temperature: np.ndarray
    segments: tuple[Segment, ...] = field(default_factory=tuple)

    @property
    def duration(self) -> float:
        """Total length of the schedule [s]."""
        return float(self.time[-1])

    def temperature_at(self, t) -> np.ndarray:
        """Bath temperature [K] at times ``t`` [s]; at a plunge time, the temperature after the plunge."""
        t = np.asarray(t, dtype=float)
        idx = np.searchsorted(self.time, t, side="right") - 1
        idx = np.clip(idx, 0, len(self.time) - 2)
        t0, t1 = self.time[idx], self.time[idx + 1]
        y0, y1 = self.temperature[idx], self.temperature[idx + 1]
        span = np.where(t1 > t0, t1 - t0, 1.0)
        # a zero-length interval is a plunge: at its time the bath is already the new one
        frac = np.where(t1 > t0, np.clip((t - t0) / span, 0.0, 1.0), 1.0)
        return y0 + frac * (y1 - y0)


def segments(schedule: Schedule) -> tuple[Segment, ...]:
    """The schedule's steps laid out in time (see :class:`Segment`)."""
    out = []
    t = 0.0
    temp = schedule.start_temperature
    for step in schedule.steps:
        if step.kind == "ramp":
            dt = abs(step.target_temperature - temp) / step.rate
            out.append(Segment(step.index, "ramp", t, t + dt, temp, step.target_temperature))
            t += dt
            temp = step.target_temperature
        elif step.kind == "hold":
            out.append(Segment(step.index, "hold", t, t + step.duration, temp, temp))
            t += step.duration
        elif step.kind == "plunge":
            out.append(Segment(step.index, "plunge", t, t, temp, step.target_temperature))
            temp = step.target_temperature
        else:  # seed: an event, the bath carries on
            out.append(Segment(step.index, "seed", t, t, temp, temp))
    return tuple(out)


def bath_history(schedule: Schedule, max_step_s: float = 60.0) -> History:
    """Resolve a schedule into the bath temperature history.

    Parameters
    ----------
    schedule : Schedule
        The validated schedule (SI units).
    max_step_s : float
        Largest spacing of samples inside a segment [s]; segment ends are always sampled.

    Returns
    -------
    History
        ``time`` [s] (non-decreasing; a plunge repeats its time) and bath ``temperature`` [K].
    """
    if not max_step_s > 0:
        raise ValueError(f"max_step_s must be positive, got {max_step_s!r}")
    segs = segments(schedule)
    times = [0.0]
    temps = [schedule.start_temperature]
    for seg in segs:
        if seg.kind == "plunge":
            times.append(seg.t_start)
            temps.append(seg.temperature_end)
            continue
        if seg.kind == "seed":
            continue
        n = max(1, int(np.ceil((seg.t_end - seg.t_start) / max_step_s)))
        frac = np.arange(1, n + 1) / n
        times.extend((seg.t_start + frac * (seg.t_end - seg.t_start)).tolist())
        temps.extend((seg.temperature_start + frac * (seg.temperature_end - seg.temperature_start)).tolist())
    return History(np.asarray(times), np.asarray(temps), segs)
