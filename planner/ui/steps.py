"""The steps of the planner and what each shows: its fields, its list rows, its chart, its sections.

Steps are data. A new step, field or chart needs an entry here (and a chart function registered in
:mod:`planner.ui.stepcharts`), not new widget code: the views render whatever the registry lists. An
assessment section that no step names still appears on the Review step.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from functools import cache
from importlib import resources
from typing import Any

from planner.ui.fields import CONCENTRATION_WORDS
from planner.yamlio import load_yaml

__all__ = ["CONCENTRATION_WORDS", "STEPS", "Field", "RowKind", "Rows", "StepSpec", "register_step", "step"]

CONCENTRATION_UNITS: tuple[str, ...] = ("mass_percent", "molal", "molar", "percent_w_v", "percent_v_v")


@cache
def data_keys(filename: str) -> tuple[str, ...]:
    """Top-level keys of a packaged data file, or () when the file is not installed."""
    try:
        text = resources.files("planner").joinpath(f"data/{filename}").read_text(encoding="utf-8")
    except (FileNotFoundError, OSError):
        return ()
    data = load_yaml(text, filename)
    return tuple(str(k) for k in data) if isinstance(data, dict) else ()


def agent_names() -> tuple[str, ...]:
    """Cryoprotectant names the solution model knows (``planner.solution.known_agents``), or ()."""
    try:
        from planner.solution import known_agents
    except ImportError:
        return data_keys("agents.yaml")
    return tuple(known_agents())


@dataclass(frozen=True)
class Field:
    """One input. ``path`` is the protocol key path (inside a row: relative to the row).

    ``kind``: ``number`` (a text box read as a number), ``choice`` (a dropdown of ``choices`` or of the
    words returned by ``choices_from``), ``text`` or ``longtext``. ``shown`` decides from the draft
    whether the field applies (rigid-chamber fields only for a rigid chamber).
    """

    path: str
    kind: str = "number"
    choices: tuple[str, ...] = ()
    choices_from: Callable[[], tuple[str, ...]] | None = None
    shown: Callable[[Any], bool] | None = None

    def options(self) -> tuple[str, ...]:
        if self.choices_from is not None:
            words = self.choices_from()
            if words:
                return tuple(words)
        return self.choices


@dataclass(frozen=True)
class RowKind:
    """One kind of list row: how to recognise it (``key``) and the fields a new one starts with."""

    name: str
    key: str
    template: dict[str, Any]
    fields: tuple[Field, ...]


@dataclass(frozen=True)
class Rows:
    """A list in the protocol (cryoprotectants, schedule steps), edited as rows that can be added/removed."""

    path: str
    title: str
    kinds: tuple[RowKind, ...]
    min_rows: int = 0
    unit_keys: tuple[str, ...] = ()  # a row holds exactly one of these keys; the unit choice renames it

    def kind_of(self, row: Any) -> RowKind | None:
        if isinstance(row, dict):
            for k in self.kinds:
                if k.key in row:
                    return k
        return self.kinds[0] if len(self.kinds) == 1 else None


@dataclass(frozen=True)
class StepSpec:
    """One step of the planner.

    ``kind``: ``form`` (inputs), ``review`` or ``sign``. ``sections`` are the assessment sections whose
    key numbers the step shows; ``chart`` names a chart function in :mod:`planner.ui.stepcharts`;
    ``optional_path`` names the protocol key a step adds or removes as a whole (cells).
    """

    name: str
    title: str
    kind: str = "form"
    items: tuple[Field | Rows, ...] = ()
    sections: tuple[str, ...] = ()
    chart: str | None = None
    optional_path: str | None = None
    intro: str = ""


def _rigid(draft) -> bool:
    return draft.get("container.kind") == "rigid"


def _open(draft) -> bool:
    return draft.get("container.kind") != "rigid"


def _geometry(*allowed: str) -> Callable[[Any], bool]:
    return lambda draft: draft.get("sample.geometry") in allowed


_CONCENTRATION_ROW = RowKind(
    "agent", "agent", {"agent": None, "mass_percent": None},
    (Field("agent", "choice", choices_from=agent_names),),
)

_SCHEDULE_KINDS = (
    RowKind("ramp", "ramp_to_c", {"ramp_to_c": None, "rate_c_per_min": None},
            (Field("ramp_to_c"), Field("rate_c_per_min"))),
    RowKind("hold", "hold_h", {"hold_h": None}, (Field("hold_h"),)),
    RowKind("hold (minutes)", "hold_min", {"hold_min": None}, (Field("hold_min"),)),
    RowKind("plunge", "plunge_to_c", {"plunge_to_c": None},
            (Field("plunge_to_c"),
             Field("heat_transfer", "choice", choices_from=lambda: data_keys("heat_transfer.yaml")),
             Field("h_w_per_m2_k"))),
    RowKind("seed ice", "seed_ice", {"seed_ice": {"at_c": None}}, (Field("seed_ice.at_c"),)),
)

_CELL_STEP = RowKind(
    "bath", "temperature_c",
    {"carrier": "isotonic-saline", "cryoprotectants": [{"agent": None, "mass_percent": None}],
     "temperature_c": None, "duration_min": None},
    (Field("carrier", "choice", ("water", "isotonic-saline")),
     Field("cryoprotectants[0].agent", "choice", choices_from=agent_names),
     Field("temperature_c"), Field("duration_min")),
)

STEPS: list[StepSpec] = [
    StepSpec(
        "sample", "Sample",
        items=(
            Field("title", "text"),
            Field("sample.volume_ml"),
            Field("sample.geometry", "choice", ("sphere", "cylinder", "slab")),
            Field("sample.diameter_mm", shown=_geometry("sphere", "cylinder")),
            Field("sample.height_mm", shown=_geometry("cylinder")),
            Field("sample.thickness_mm", shown=_geometry("slab")),
            Field("sample.origin", "choice", ("human", "animal", "plant", "microbial", "synthetic")),
            Field("sample.description", "text"),
            Field("notes", "longtext"),
        ),
        sections=("thermal",),
        chart="freeze_map",
        intro="What is being preserved: its volume and shape decide how fast it follows the bath and how "
              "likely ice is to start in it.",
    ),
    StepSpec(
        "container", "Container",
        items=(
            Field("container.kind", "choice", ("open", "rigid")),
            Field("container.interface", "choice", ("exposed", "sealed")),
            Field("container.shape", "choice", ("cylinder", "sphere"), shown=_rigid),
            Field("container.cavity_ml", shown=_rigid),
            Field("container.inner_diameter_mm", shown=_rigid),
            Field("container.outer_diameter_mm", shown=_rigid),
            Field("container.material", "choice", choices_from=lambda: data_keys("materials.yaml"), shown=_rigid),
            Field("container.trapped_gas_ml", shown=_rigid),
            Field("container.cavity_compliance_per_gpa", shown=_rigid),
            Field("nucleation.preset", "choice",
                  choices_from=lambda: (*data_keys("nucleation_presets.yaml"), "homogeneous-only")),
            Field("nucleation.calibration", "text"),
        ),
        sections=("chamber", "nucleation"),
        chart="chamber",
        intro="Open containers stay at atmospheric pressure; a sealed rigid chamber keeps its volume, so any "
              "ice that forms raises the pressure.",
    ),
    StepSpec(
        "solution", "Solution",
        items=(
            Field("solution.carrier", "choice", ("water", "isotonic-saline")),
            Rows("solution.cryoprotectants", "Cryoprotectants", (_CONCENTRATION_ROW,),
                 unit_keys=CONCENTRATION_UNITS),
            Field("solution.critical_cooling_rate_c_per_min"),
            Field("solution.critical_warming_rate_c_per_min"),
        ),
        sections=("solution", "vitrification"),
        chart="freezing_point",
        intro="The carrier and cryoprotectants set the liquidus (the freezing point) and how far below it "
              "the hold sits.",
    ),
    StepSpec(
        "schedule", "Schedule",
        items=(
            Field("schedule.start_c"),
            Rows("schedule.steps", "Steps", _SCHEDULE_KINDS, min_rows=1),
            Field("environment.heat_transfer", "choice", choices_from=lambda: data_keys("heat_transfer.yaml")),
            Field("environment.h_w_per_m2_k"),
        ),
        sections=("thermal", "freezing"),
        chart="schedule",
        intro="Cooling, holding and warming as the bath runs them; the sample lags behind the bath.",
    ),
    StepSpec(
        "cells", "Cells",
        items=(
            Field("cells.preset", "choice", choices_from=lambda: data_keys("cells.yaml")),
            Field("cells.radius_um"),
            Field("cells.volume_um3"),
            Field("cells.inactive_fraction"),
            Field("cells.lp_um_per_min_atm"),
            Field("cells.lp_activation_kj_per_mol"),
            Field("cells.min_volume_fraction"),
            Field("cells.max_volume_fraction"),
            Rows("cells.loading", "Loading baths", (_CELL_STEP,), unit_keys=()),
            Rows("cells.unloading", "Unloading baths", (_CELL_STEP,), unit_keys=()),
        ),
        sections=("cells",),
        chart="cells",
        optional_path="cells",
        intro="Optional: how the cells shrink and swell while the cryoprotectant goes in and comes out.",
    ),
    StepSpec("review", "Review", kind="review",
             intro="Margins against the policy, flags, cautions, and changes that would help."),
    StepSpec("sign", "Sign & archive", kind="sign",
             intro="Sign the assessed protocol with your key and store the record in an archive."),
]


def step_names() -> list[str]:
    return [s.name for s in STEPS]


def step(name: str) -> StepSpec:
    for s in STEPS:
        if s.name == name:
            return s
    from planner.errors import choice_error

    raise choice_error("step", name, step_names())


def register_step(spec: StepSpec, before: str = "review") -> None:
    """Add a step before ``before`` (a section with its own inputs appears with this one call)."""
    names = step_names()
    if spec.name in names:
        raise ValueError(f"step {spec.name!r} is already registered")
    STEPS.insert(names.index(before), spec)


# Titles of assessment sections, for the Review step; an unknown section shows under its own name.
SECTION_TITLES: dict[str, str] = {
    "solution": "Solution",
    "thermal": "Heat transfer",
    "chamber": "Rigid chamber",
    "nucleation": "Ice nucleation",
    "cells": "Cells",
    "vitrification": "Vitrification",
    "freezing": "Freezing",
}

ROW_KINDS: dict[str, tuple[RowKind, ...]] = {"schedule": _SCHEDULE_KINDS}


def row_fields(rows: Rows, row: Any) -> tuple[Field, ...]:
    """Fields a row shows: its kind's fields plus any other keys the row holds (nothing is hidden)."""
    kind = rows.kind_of(row)
    known = list(kind.fields) if kind else []
    have = {f.path for f in known}
    if isinstance(row, dict):
        from planner.ui.draft import Draft

        for path, _ in Draft(row).leaves():
            if path not in have and path.split(".")[0] not in rows.unit_keys:
                last = path.rsplit(".", 1)[-1]
                if last == "agent":  # a second agent of a bath: the same list as the first
                    known.append(Field(path, "choice", choices_from=agent_names))
                elif last == "carrier":
                    known.append(Field(path, "choice", ("water", "isotonic-saline")))
                else:
                    known.append(Field(path, "text" if not _numberish(path) else "number"))
                have.add(path)
    return tuple(known)


def _numberish(path: str) -> bool:
    """True when the key (or, for a per-agent mapping such as ``permeability_um_per_s.dmso``, its parent)
    carries a unit, so the box reads a number."""
    from planner.ui.fields import unit_of

    parts = path.split(".")
    key = parts[-1]
    parent = parts[-2] if len(parts) > 1 else ""
    return bool(unit_of(key)[1]) or key in CONCENTRATION_UNITS or bool(unit_of(parent)[1])

