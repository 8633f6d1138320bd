"""A consistent copy of a model's last valid result, for charts drawn on another thread (no altair here)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class Snapshot:
    """The model's last valid result, taken at once, so a chart drawn on another thread stays consistent."""

    protocol: Any
    assessment: Any
    report: Any
    stale: bool


def snapshot(model) -> Snapshot:
    evaluation = model.evaluation
    if evaluation is None:
        return Snapshot(None, None, None, bool(model.stale))
    return Snapshot(evaluation.protocol, evaluation.assessment, evaluation.report, bool(model.stale))
