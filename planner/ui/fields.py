"""How each protocol key is shown as an input: its label with the unit, the allowed words, a hint.

Labels come from the key itself (``volume_ml`` → "Volume (mL)"): the unit is the key's suffix, the one
place it is written. :data:`FIELD_TEXT` adds plain-word labels, choices and hints for known keys; a key
the table does not know still gets a labelled field, so a new protocol key shows up without UI code.
Patterns use ``[]`` for "any row": ``solution.cryoprotectants[].agent``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

# Key suffix → unit shown in the label. Longest suffixes first.
UNIT_SUFFIXES: tuple[tuple[str, str], ...] = (
    ("_c_per_min", "°C/min"),
    ("_k_per_min", "K/min"),
    ("_c_per_s", "°C/s"),
    ("_k_per_s", "K/s"),
    ("_w_per_m2_k", "W/(m² K)"),
    ("_w_per_m_k", "W/(m K)"),
    ("_j_per_kg_k", "J/(kg K)"),
    ("_j_per_k", "J/K"),
    ("_kg_per_m3", "kg/m³"),
    ("_osmol_per_kg", "osmol/kg"),
    ("_um_per_min_atm", "µm/(min atm)"),
    ("_kj_per_mol", "kJ/mol"),
    ("_per_gpa", "1/GPa"),
    ("_um3", "µm³"),
    ("_kcal_per_mol", "kcal/mol"),
    ("_per_cm3_s", "1/(cm³ s)"),
    ("_mosm_per_kg", "mOsm/kg"),
    ("_mass_percent", "% w/w"),
    ("_percent_w_v", "% w/v"),
    ("_percent_v_v", "% v/v"),
    ("_percent", "%"),
    ("_molal", "mol/kg"),
    ("_molar", "mol/L"),
    ("_um_per_s", "µm/s"),
    ("_ml", "mL"),
    ("_ul", "µL"),
    ("_l", "L"),
    ("_mm", "mm"),
    ("_um", "µm"),
    ("_nm", "nm"),
    ("_kt", "kT"),  # an energy in units of the thermal energy k_B T
    ("_m", "m"),
    ("_c", "°C"),
    ("_k", "K"),
    ("_h", "h"),
    ("_d", "days"),
    ("_min", "min"),
    ("_s", "s"),
    ("_mpa", "MPa"),
    ("_kpa", "kPa"),
    ("_pa", "Pa"),
    ("_gpa", "GPa"),
    ("_fraction", "fraction"),
)


@dataclass(frozen=True)
class FieldText:
    """Plain-word label, allowed words and a hint for one protocol key (unit still from the suffix)."""

    label: str | None = None
    choices: tuple[str, ...] = ()
    hint: str = ""


# Known keys. Only words live here; ranges and checks belong to the protocol loader, whose errors the
# app shows as they are.
FIELD_TEXT: dict[str, FieldText] = {
    "title": FieldText("Protocol title"),
    "notes": FieldText("Notes"),
    "sample.volume_ml": FieldText(hint="volume of the sample body"),
    "sample.geometry": FieldText("Shape", hint="sphere, cylinder or slab"),
    "sample.origin": FieldText("Origin", hint="decides which biosafety cautions apply"),
    "sample.description": FieldText("Description"),
    "container.kind": FieldText("Container", hint="open: at atmospheric pressure; rigid: sealed, constant volume"),
    "container.interface": FieldText("Liquid–air interface", hint="sealed: no air touches the liquid"),
    "container.shape": FieldText("Chamber shape"),
    "container.cavity_ml": FieldText("Cavity volume"),
    "container.inner_diameter_mm": FieldText("Inner diameter"),
    "container.outer_diameter_mm": FieldText("Outer diameter"),
    "container.material": FieldText("Wall material"),
    "container.trapped_gas_ml": FieldText("Gas sealed in"),
    "container.cavity_compliance_per_gpa": FieldText("Cavity compliance", hint="leave empty to use the wall's own"),
    "solution.carrier": FieldText("Carrier"),
    "solution.cryoprotectants[].agent": FieldText("Cryoprotectant"),
    "solution.critical_cooling_rate_c_per_min": FieldText("Critical cooling rate", hint="for your own cocktail"),
    "solution.critical_warming_rate_c_per_min": FieldText("Critical warming rate", hint="for your own cocktail"),
    "schedule.start_c": FieldText("Start temperature"),
    "schedule.steps[].ramp_to_c": FieldText("Ramp to"),
    "schedule.steps[].rate_c_per_min": FieldText("Rate"),
    "schedule.steps[].hold_h": FieldText("Hold for"),
    "schedule.steps[].hold_min": FieldText("Hold for"),
    "schedule.steps[].plunge_to_c": FieldText("Plunge into bath at"),
    "schedule.steps[].heat_transfer": FieldText("Into"),
    "schedule.steps[].h_w_per_m2_k": FieldText("Heat-transfer coefficient"),
    "schedule.steps[].seed_ice.at_c": FieldText("Seed ice at"),
    "environment.heat_transfer": FieldText("Bath or surroundings", hint="how heat leaves the sample"),
    "environment.h_w_per_m2_k": FieldText("Heat-transfer coefficient", hint="instead of a named bath"),
    "nucleation.preset": FieldText("Ice nucleation data"),
    "nucleation.calibration": FieldText("Calibration file", hint="made in the calibrate notebook"),
    "cells.preset": FieldText("Cell type"),
    "cells.radius_um": FieldText("Cell radius"),
    "cells.volume_um3": FieldText("Cell volume"),
    "cells.inactive_fraction": FieldText("Osmotically inactive fraction"),
    "cells.lp_um_per_min_atm": FieldText("Hydraulic conductivity Lp"),
    "cells.lp_activation_kj_per_mol": FieldText("Activation energy of Lp"),
    "cells.min_volume_fraction": FieldText("Smallest tolerated volume", hint="fraction of isotonic volume"),
    "cells.max_volume_fraction": FieldText("Largest tolerated volume", hint="fraction of isotonic volume"),
    "cells.loading[].carrier": FieldText("Carrier"),
    "cells.loading[].cryoprotectants[].agent": FieldText("Cryoprotectant"),
    "cells.loading[].temperature_c": FieldText("Bath temperature"),
    "cells.loading[].duration_min": FieldText("Time in bath"),
    "cells.unloading[].carrier": FieldText("Carrier"),
    "cells.unloading[].cryoprotectants[].agent": FieldText("Cryoprotectant"),
    "cells.unloading[].temperature_c": FieldText("Bath temperature"),
    "cells.unloading[].duration_min": FieldText("Time in bath"),
}


# Short stems that read badly as words.
STEM_WORDS: dict[str, str] = {
    "h": "Heat-transfer coefficient", "lp": "Hydraulic conductivity Lp",
    # report keys spell 0.5 K as 0p5k (a key holds no dot)
    "time_to_within_0p5k": "Time to within 0.5 K of the bath",
    "time_to_within_0p5k_range": "Time to within 0.5 K of the bath, over the h range",
    "von_mises": "Von Mises stress", "barrier": "Nucleation barrier",
}


def pattern_of(path: str) -> str:
    """``a.b[3].c`` → ``a.b[].c`` (the key of :data:`FIELD_TEXT`)."""
    return re.sub(r"\[\d+\]", "[]", path)


def unit_of(key: str) -> tuple[str, str]:
    """Split a key into (stem, unit shown): ``hold_h`` → ("hold", "h"); no known suffix → (key, "")."""
    for suffix, unit in UNIT_SUFFIXES:
        if key.endswith(suffix) and len(key) > len(suffix):
            return key[: -len(suffix)], unit
    return key, ""


CONCENTRATION_WORDS: dict[str, str] = {
    "mass_percent": "% w/w",
    "molal": "mol/kg water",
    "molar": "mol/L",
    "percent_w_v": "% w/v",
    "percent_v_v": "% v/v",
}


def label_for(path: str) -> str:
    """The label a field shows: plain words and the unit in brackets, e.g. "Volume (mL)"."""
    parts = re.sub(r"\[\d+\]$", "", path).split(".")
    key = parts[-1]
    if len(parts) > 1 and not unit_of(key)[1] and unit_of(parts[-2])[1] and key not in CONCENTRATION_WORDS:
        # a per-agent mapping: permeability_um_per_s.dmso → "Permeability of dmso (µm/s)"
        stem, unit = unit_of(parts[-2])
        words = STEM_WORDS.get(stem) or stem.replace("_", " ").strip().capitalize()
        return f"{words} of {key} ({unit})"
    if key in CONCENTRATION_WORDS:
        return f"Concentration ({CONCENTRATION_WORDS[key]})"
    if key.endswith("_for_target") and len(key) > len("_for_target"):
        # "what would it take" keys carry their unit inside: coldest_hold_c_for_target
        stem, unit = unit_of(key[: -len("_for_target")])
        words = STEM_WORDS.get(stem) or stem.replace("_", " ").strip().capitalize()
        return f"{words} for the target ({unit})" if unit else f"{words} for the target"
    stem, unit = unit_of(key)
    text = FIELD_TEXT.get(pattern_of(path), FieldText()).label
    if text is None:
        text = STEM_WORDS.get(stem) or stem.replace("_", " ").strip().capitalize()
    return f"{text} ({unit})" if unit else text


def choices_for(path: str) -> tuple[str, ...]:
    return FIELD_TEXT.get(pattern_of(path), FieldText()).choices


# the schedule's temperatures also have a rigid chamber's coldest limit, checked in the loader's code
_RIGID_LIMITED = ("schedule.start_c", "schedule.steps[].ramp_to_c", "schedule.steps[].plunge_to_c")


def range_for(path: str) -> str:
    """The valid range of the number at ``path`` in the loader's own words (from
    :data:`planner.protocol.BOUNDS`), or "" for a key that is not a number. ``tests/test_ui_planner.py``
    compares it with the loader's own refusal."""
    from planner import protocol as p

    bound = p.bound_for(path)
    if bound is None:
        return ""
    if pattern_of(path) in _RIGID_LIMITED:
        return f"{bound.words()}; in a rigid chamber no colder than {p.IH_III_TRIPLE_POINT_C:.3f}"
    return bound.words()


def hint_for(path: str) -> str:
    """The hint shown with a field: its words, then its valid range where the loader keeps one as data."""
    words = FIELD_TEXT.get(pattern_of(path), FieldText()).hint
    valid = range_for(path)
    if valid:
        valid = f"valid: {valid}"
    return "; ".join(part for part in (words, valid) if part)


def css_name(path: str) -> str:
    """A CSS class for the field at ``path`` (stable hook for tests): ``cm-f-sample-volume_ml``."""
    return "cm-f-" + re.sub(r"[^A-Za-z0-9_]+", "-", path).strip("-")
