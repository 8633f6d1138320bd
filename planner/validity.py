"""Validity ranges as data next to the models they bound.

A model module declares its ranges once, e.g.::

    KOOP_MURRAY_2016 = Validity("koop-murray-2016 homogeneous rate", "koop-murray-2016",
                                {"temperature": Range(233.0, 239.0, "K")})

and uses :meth:`Validity.check` to refuse impossible input or :meth:`Validity.flags` to flag an
extrapolation inside the result object.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from planner.errors import ExtrapolationWarning, ModelRangeError
from planner.results import Flag


@dataclass(frozen=True)
class Range:
    """A closed interval ``low <= x <= high`` in SI units (``None`` for an open end)."""

    low: float | None
    high: float | None
    unit: str

    def contains(self, value) -> np.ndarray:
        x = np.asarray(value, dtype=float)
        ok = np.isfinite(x)
        if self.low is not None:
            ok &= x >= self.low
        if self.high is not None:
            ok &= x <= self.high
        return ok

    def describe(self) -> str:
        lo = "-inf" if self.low is None else f"{self.low:g}"
        hi = "inf" if self.high is None else f"{self.high:g}"
        return f"{lo} to {hi} {self.unit}"


@dataclass(frozen=True)
class Validity:
    """The ranges over which one model (or one coefficient set) was fitted or is valid."""

    model: str
    source: str
    ranges: dict[str, Range] = field(default_factory=dict)

    def check(self, **values) -> None:
        """Raise :class:`ModelRangeError` when any value lies outside its range (refuse tier)."""
        for name, value in values.items():
            rng = self.ranges[name]
            ok = rng.contains(value)
            if not np.all(ok):
                bad = np.asarray(value, dtype=float)[~ok] if np.ndim(value) else value
                shown = bad if np.ndim(bad) == 0 else bad.ravel()[:3].tolist()
                raise ModelRangeError(name, shown, rng.describe(), self.model)

    def flags(self, warn: bool = True, **values) -> list[Flag]:
        """Return an ``extrapolated`` flag per quantity outside its range (flag tier)."""
        out: list[Flag] = []
        for name, value in values.items():
            rng = self.ranges[name]
            if not np.all(rng.contains(value)):
                flag = Flag(
                    "extrapolated",
                    f"{self.model}: {name} outside the fitted range {rng.describe()}",
                    self.source,
                )
                out.append(flag)
                if warn:
                    warnings.warn(flag.message, ExtrapolationWarning, stacklevel=3)
        return out
