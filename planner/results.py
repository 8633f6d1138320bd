"""Typed result objects: every result carries its model, parameters, source key and flags.

Results are dataclasses; :func:`to_jsonable` turns any of them (numpy values included) into plain JSON
types, so the assessment, the record and the app all present the same numbers.
"""

from __future__ import annotations

import dataclasses
import math
import re
from dataclasses import dataclass, field
from typing import Any

import numpy as np


@dataclass(frozen=True)
class Flag:
    """Something the reader must know about a result.

    ``code`` is one of a small set of plain words: ``extrapolated`` (a model used outside its fitted
    range), ``missing-data`` (a quantity could not be computed for lack of data), ``default-used``
    (the planner chose a documented default because the protocol was silent), ``indicative`` (a model
    whose parameters are rough), ``refused`` (a quantity the planner will not compute here),
    ``not-converged`` (a numerical solution left a step outside its tolerance: the numbers taken from it
    are withheld as None, and the flag gives the step's time and the residual).
    """

    code: str
    message: str
    source: str | None = None


_SECTION_PREFIX = re.compile(r"([a-z][a-z_-]*): (.+)", re.DOTALL)


def shown_flags(flags: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Flags as a reader sees them: one entry for a flag that several sections raise in the same words.

    The assessment prefixes each flag's message with its section ("solution: ...", "chamber: ..."); two
    flags with the same code, source and words after that prefix are shown once, naming both sections
    ("solution, chamber: ..."), in the order they first appear. Nothing is dropped: every section that
    raised the flag is named. The report itself keeps every flag as raised.
    """
    out: list[dict[str, Any]] = []
    seen: dict[tuple[str, str, str], tuple[dict[str, Any], list[str]]] = {}
    for f in flags:
        entry = dict(f)
        m = _SECTION_PREFIX.fullmatch(str(f.get("message", "")))
        if m is None:  # no section to name: shown as raised
            out.append(entry)
            continue
        section, words = m.groups()
        key = (str(f.get("code", "")), str(f.get("source") or ""), words)
        if key in seen:
            first, sections = seen[key]
            if section not in sections:
                sections.append(section)
                first["message"] = f"{', '.join(sections)}: {words}"
            continue
        seen[key] = (entry, [section])
        out.append(entry)
    return out


@dataclass
class Result:
    """Base of every section result: a model name, its parameters, a source key and flags."""

    model: str = ""
    source: str = ""
    parameters: dict[str, Any] = field(default_factory=dict)
    flags: list[Flag] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return to_jsonable(self)


def to_jsonable(obj: Any) -> Any:
    """Convert dataclasses, numpy scalars/arrays, tuples and mappings to JSON types.

    Non-finite floats become ``None`` (JSON has no NaN); callers that need to say *why* a number is
    missing add a flag.
    """
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: to_jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj) if not f.name.startswith("_")}
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [to_jsonable(v) for v in obj.tolist()]
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer, int)):
        return int(obj)
    if isinstance(obj, (np.floating, float)):
        x = float(obj)
        return x if math.isfinite(x) else None
    return obj
