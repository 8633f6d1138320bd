"""The protocol a user writes: typed, validated, in SI units.

A protocol file is YAML with lab units in its keys (``volume_ml``, ``hold_h``); :func:`load_protocol`
validates every key and converts once to SI. The objects below are what every other layer reads.
"""

from __future__ import annotations

import functools
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from planner.errors import InputError, choice_error, did_you_mean
from planner.yamlio import load_yaml

CELSIUS_OFFSET = 273.15  # K


@dataclass(frozen=True)
class Sample:
    volume: float  # m3, from volume_ml
    geometry: str  # sphere | cylinder | slab
    diameter: float | None = None  # m, sphere and cylinder
    height: float | None = None  # m, cylinder (given, or derived from volume and diameter)
    thickness: float | None = None  # m, slab (heat flows through both faces)
    origin: str | None = None  # human | animal | plant | microbial | synthetic (biosafety cautions)
    description: str | None = None

    @property
    def surface_area(self) -> float:
        """Outer surface of the sample body [m2]."""
        if self.geometry == "sphere":
            return math.pi * self.diameter**2
        if self.geometry == "cylinder":
            r = self.diameter / 2
            return 2 * math.pi * r * self.height + 2 * math.pi * r**2
        return 2 * self.volume / self.thickness  # slab: both faces

    @property
    def characteristic_length(self) -> float:
        """V/A [m], the length in the Biot number."""
        return self.volume / self.surface_area


@dataclass(frozen=True)
class Container:
    kind: str  # rigid (sealed, isochoric) | open (isobaric)
    interface: str = "exposed"  # liquid-air interface: exposed | sealed (rigid chambers are sealed)
    shape: str = "cylinder"  # rigid chamber body: cylinder (closed ends) | sphere
    cavity_volume: float | None = None  # m3, rigid only
    inner_diameter: float | None = None  # m
    outer_diameter: float | None = None  # m
    material: str | None = None  # a key of planner/data/materials.yaml
    trapped_gas_volume: float = 0.0  # m3 of gas sealed in with the solution, at fill
    cavity_compliance: float | None = None  # 1/Pa, override of the wall's own compliance


@dataclass(frozen=True)
class Cryoprotectant:
    agent: str  # a key of planner/data/agents.yaml
    unit: str  # mass_percent | molal | molar | percent_w_v | percent_v_v
    value: float  # in that unit (percent, mol/kg water, mol/L)


@dataclass(frozen=True)
class Solution:
    carrier: str  # water | isotonic-saline
    cryoprotectants: tuple[Cryoprotectant, ...] = ()
    critical_cooling_rate: float | None = None  # K/s, user-entered for their own cocktail
    critical_warming_rate: float | None = None  # K/s


@dataclass(frozen=True)
class Step:
    index: int  # position in schedule.steps, for error messages
    kind: str  # ramp | hold | plunge | seed
    target_temperature: float | None = None  # K: ramp and plunge end, seed temperature
    rate: float | None = None  # K/s, ramp only (always > 0; direction from the targets)
    duration: float | None = None  # s, hold only
    heat_transfer: str | None = None  # plunge: environment preset the sample moves into
    h: float | None = None  # W/(m2 K), plunge: coefficient given instead of a preset

    @property
    def key_path(self) -> str:
        return f"schedule.steps[{self.index}]"


@dataclass(frozen=True)
class Schedule:
    start_temperature: float  # K
    steps: tuple[Step, ...]

    def temperatures(self) -> list[float]:
        """Start and every target temperature [K], in order."""
        out = [self.start_temperature]
        out += [s.target_temperature for s in self.steps if s.target_temperature is not None and s.kind != "seed"]
        return out

    @property
    def coldest_temperature(self) -> float:
        """Coldest bath temperature the schedule asks for [K]."""
        return min(self.temperatures())

    @property
    def uses_liquid_nitrogen(self) -> bool:
        ln2 = {"ln2-vapour", "ln2-immersion"}
        return any(s.heat_transfer in ln2 for s in self.steps) or self.coldest_temperature < 123.15


@dataclass(frozen=True)
class Environment:
    preset: str | None = None  # a key of planner/data/heat_transfer.yaml
    h: float | None = None  # W/(m2 K), given instead of a preset
    defaulted: bool = False  # True when the protocol had no environment key


@dataclass(frozen=True)
class Nucleation:
    preset: str | None = None  # a key of planner/data/nucleation_presets.yaml, or homogeneous-only
    calibration: Path | None = None  # a calibration file made from the user's freezing assay
    defaulted: bool = False  # True when the protocol had no nucleation key


@dataclass(frozen=True)
class CellStep:
    index: int
    solution: Solution
    temperature: float  # K
    duration: float  # s


@dataclass(frozen=True)
class Cells:
    preset: str | None = None  # a key of planner/data/cells.yaml
    radius: float | None = None  # m
    volume: float | None = None  # m3, isotonic cell volume (alternative to radius)
    inactive_fraction: float | None = None  # osmotically inactive fraction of isotonic volume
    hydraulic_conductivity: float | None = None  # L_p at 20 C [m/(Pa s)]
    hydraulic_activation_energy: float | None = None  # J/mol
    solute_permeability: dict[str, float] = field(default_factory=dict)  # agent -> P_s at 20 C [m/s]
    permeability_activation_energy: dict[str, float] = field(default_factory=dict)  # agent -> J/mol
    min_volume_fraction: float | None = None  # osmotic tolerance, fraction of isotonic volume
    max_volume_fraction: float | None = None
    loading: tuple[CellStep, ...] = ()
    unloading: tuple[CellStep, ...] = ()


@dataclass(frozen=True)
class Policy:
    margins: dict[str, dict[str, float]] = field(default_factory=dict)  # name -> {watch, stop}
    target_freeze_probability: float = 0.01


@dataclass(frozen=True)
class Protocol:
    schema: str
    title: str
    sample: Sample
    container: Container
    solution: Solution
    schedule: Schedule
    environment: Environment = Environment(defaulted=True)
    nucleation: Nucleation = Nucleation(defaulted=True)
    cells: Cells | None = None
    policy: Policy = Policy()
    notes: str | None = None
    entered: dict[str, Any] = field(default_factory=dict)  # the parsed document as entered
    path: Path | None = None  # where it was read from, if a file


# ---------------------------------------------------------------------------------------------------------
# Loading and validation. Lab units live only here: every number is checked in the unit of its key and
# converted once to SI.

SCHEMA = "coldmargin/protocol-1"
MAX_DOCUMENT_BYTES = 1_000_000  # a protocol is a page of YAML; anything larger is not one
GEOMETRIES = ("sphere", "cylinder", "slab")
CONTAINER_KINDS = ("rigid", "open")
INTERFACES = ("exposed", "sealed")
CHAMBER_SHAPES = ("cylinder", "sphere")
CARRIERS = ("water", "isotonic-saline")
CONCENTRATION_UNITS = ("mass_percent", "molal", "molar", "percent_w_v", "percent_v_v")
ORIGINS = ("human", "animal", "plant", "microbial", "synthetic")
STEP_KEYS = ("ramp_to_c", "hold_h", "hold_min", "plunge_to_c", "seed_ice")
# Temperatures the models in this planner cover as a whole: liquid nitrogen to a warm lab.
COLDEST_C, WARMEST_C = -196.0, 40.0
MAX_SCHEDULE_H = 2 * 8760.0  # two years: longer than any published supercooled or isochoric hold
# Rigid chambers: below the ice Ih-III-liquid triple point the Ih equations do not apply [ref:iapws-r14-08]
IH_III_TRIPLE_POINT_C = 251.165 - CELSIUS_OFFSET
GEOMETRY_TOLERANCE = 0.02  # given dimensions and volume must agree to 2 %


@dataclass(frozen=True)
class Bound:
    """The valid range of one number in a protocol file, in its key's own unit: [low, high], or
    (low, high] when ``low_open``."""

    low: float
    high: float
    low_open: bool = False

    def words(self) -> str:
        """The range as every refusal and every field hint states it."""
        return _range_words(self.low, self.high, self.low_open)

    def holds(self, x: float) -> bool:
        return math.isfinite(x) and self.low <= x <= self.high and not (self.low_open and x == self.low)


def _concentration_bounds() -> dict[str, Bound]:
    # a concentration is judged against its agent's data by planner.solution; here only its sign and size
    out = {}
    for prefix in ("solution", "cells.loading[]", "cells.unloading[]"):
        for unit in CONCENTRATION_UNITS:
            out[f"{prefix}.cryoprotectants[].{unit}"] = Bound(0.0, 1e4, True)
    return out


# Every number a protocol file may hold, by key path ("[]": any list index, "*": any one key). The loader
# checks each number against its entry, and the app states the same range beside the field. Conditional
# limits (a rigid chamber's coldest temperature, a cavity at least the sample volume) are checked in the
# loader's code and named in its messages.
BOUNDS: dict[str, Bound] = {
    # smallest sizes: a picolitre droplet, a micrometre (smaller numbers are typing errors, and their
    # squares and cubes underflow)
    "sample.volume_ml": Bound(1e-9, 5000.0),
    "sample.diameter_mm": Bound(1e-3, 1000.0),
    "sample.height_mm": Bound(1e-3, 1000.0),
    "sample.thickness_mm": Bound(1e-3, 1000.0),
    "container.cavity_ml": Bound(0.0, 5000.0, True),
    "container.inner_diameter_mm": Bound(0.0, 2000.0, True),
    "container.outer_diameter_mm": Bound(0.0, 4000.0, True),
    "container.trapped_gas_ml": Bound(0.0, 5000.0),
    "container.cavity_compliance_per_gpa": Bound(0.0, 100.0),
    **_concentration_bounds(),
    "solution.critical_cooling_rate_c_per_min": Bound(0.0, 1e7, True),
    "solution.critical_warming_rate_c_per_min": Bound(0.0, 1e7, True),
    "schedule.start_c": Bound(COLDEST_C, WARMEST_C),
    "schedule.steps[].ramp_to_c": Bound(COLDEST_C, WARMEST_C),
    "schedule.steps[].rate_c_per_min": Bound(0.0, 1e6, True),
    "schedule.steps[].hold_h": Bound(0.0, MAX_SCHEDULE_H, True),
    "schedule.steps[].hold_min": Bound(0.0, MAX_SCHEDULE_H * 60, True),
    "schedule.steps[].plunge_to_c": Bound(COLDEST_C, WARMEST_C),
    "schedule.steps[].h_w_per_m2_k": Bound(0.0, 1e5, True),
    "schedule.steps[].seed_ice.at_c": Bound(-40.0, 0.0),
    "environment.h_w_per_m2_k": Bound(0.0, 1e5, True),
    "cells.radius_um": Bound(0.0, 1000.0, True),
    "cells.volume_um3": Bound(0.0, 5e9, True),
    "cells.inactive_fraction": Bound(0.0, 0.95),
    "cells.lp_um_per_min_atm": Bound(0.0, 100.0, True),
    "cells.lp_activation_kj_per_mol": Bound(0.0, 300.0),
    "cells.min_volume_fraction": Bound(0.0, 1.0, True),
    "cells.max_volume_fraction": Bound(1.0, 10.0),
    "cells.permeability_um_per_s.*": Bound(0.0, 1e3, True),
    "cells.permeability_activation_kj_per_mol.*": Bound(0.0, 300.0),
    "cells.loading[].temperature_c": Bound(-20.0, 40.0),
    "cells.loading[].duration_min": Bound(0.0, 24 * 60.0, True),
    "cells.unloading[].temperature_c": Bound(-20.0, 40.0),
    "cells.unloading[].duration_min": Bound(0.0, 24 * 60.0, True),
    "policy.target_freeze_probability": Bound(0.0, 0.5, True),
    "policy.margins.*.watch": Bound(-1e12, 1e12),
    "policy.margins.*.stop": Bound(-1e12, 1e12),
}


def bound_for(path: str) -> Bound | None:
    """The valid range of the number at a key path (``schedule.steps[2].hold_h``), or None if it holds none.

    An exact pattern wins over one with a ``*`` segment.
    """
    pattern = re.sub(r"\[\d+\]", "[]", path)
    if pattern in BOUNDS:
        return BOUNDS[pattern]
    parts = pattern.split(".")
    for key, bound in BOUNDS.items():
        if "*" in key:
            kparts = key.split(".")
            if len(kparts) == len(parts) and all(k in ("*", q) for k, q in zip(kparts, parts, strict=True)):
                return bound
    return None


def _data_keys(filename: str) -> list[str]:
    """Top-level keys of a packaged data file (the words a protocol may use for it)."""
    return list(_packaged_keys(filename))


@functools.cache
def _packaged_keys(filename: str) -> tuple[str, ...]:
    # read once per process: the app validates the whole draft on every keystroke
    from importlib import resources

    text = resources.files("planner").joinpath(f"data/{filename}").read_text(encoding="utf-8")
    data = load_yaml(text, filename)
    return tuple(str(k) for k in data)


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


class _Section:
    """A mapping from the document at a key path, checked for unknown and missing keys."""

    def __init__(self, node: Any, path: str, allowed: tuple[str, ...], required: tuple[str, ...] = ()):
        if not isinstance(node, dict):
            raise InputError(path, _shown(node), "a mapping with keys: " + ", ".join(allowed))
        for key in node:
            if not isinstance(key, str) or key not in allowed:
                raise InputError(
                    f"{path}.{key}" if path else str(key),
                    "unknown key",
                    "one of: " + ", ".join(allowed),
                    did_you_mean(str(key), allowed),
                )
        for key in required:
            if node.get(key) is None:
                raise InputError(f"{path}.{key}" if path else key, "missing", "a value is required")
        self.node = node
        self.path = path

    def at(self, key: str) -> str:
        return f"{self.path}.{key}" if self.path else key

    def has(self, key: str) -> bool:
        return key in self.node and self.node[key] is not None

    def number(self, key: str, *, default=None) -> float | None:
        """A number in the key's own unit, inside its range in :data:`BOUNDS`."""
        if not self.has(key):
            return default
        bound = bound_for(self.at(key))
        if bound is None:  # a key the loader reads as a number must have a range: a fault of this module
            raise KeyError(f"no range in BOUNDS for {self.at(key)}")
        value = self.node[key]
        if not _is_number(value):
            raise InputError(self.at(key), _shown(value), bound.words())
        try:
            x = float(value)
        except OverflowError:
            raise InputError(self.at(key), _shown(value), bound.words()) from None
        if not bound.holds(x):
            raise InputError(self.at(key), value, bound.words())
        return x

    def word(self, key: str, choices, default: str | None = None) -> str | None:
        if not self.has(key):
            return default
        value = self.node[key]
        if not isinstance(value, str) or value not in choices:
            raise choice_error(self.at(key), _shown(value), choices)
        return value

    def text(self, key: str, max_length: int = 2000, default: str | None = None) -> str | None:
        if not self.has(key):
            return default
        value = self.node[key]
        if not isinstance(value, str) or not value.strip() or len(value) > max_length:
            raise InputError(self.at(key), _shown(value), f"text of 1 to {max_length} characters")
        return value

    def boolean(self, key: str, default: bool) -> bool:
        if not self.has(key):
            return default
        value = self.node[key]
        if not isinstance(value, bool):
            raise InputError(self.at(key), _shown(value), "true or false")
        return value

    def items(self, key: str, min_items: int = 0, max_items: int = 1000) -> list:
        if not self.has(key):
            if min_items:
                raise InputError(self.at(key), "missing", f"a list of at least {min_items} item(s)")
            return []
        value = self.node[key]
        if not isinstance(value, list) or not (min_items <= len(value) <= max_items):
            raise InputError(self.at(key), _shown(value), f"a list of {min_items} to {max_items} items")
        return value


def _shown(value: Any) -> Any:
    """The value as the message shows it: short, and never a whole nested document."""
    text = repr(value)
    return value if len(text) <= 60 else text[:57] + "..."


def _range_words(low: float, high: float, low_open: bool) -> str:
    return f"a number {'above' if low_open else 'from'} {low:g} {'up to' if low_open else 'to'} {high:g}"


def parse_protocol(text: str, name: str = "protocol", base_dir: Path | None = None) -> Protocol:
    """Parse and validate a protocol document.

    Parameters
    ----------
    text : str
        The YAML text as the user wrote it.
    name : str
        What to call the document in messages (usually its file name).
    base_dir : Path, optional
        Folder that relative paths in the protocol (a calibration file) are read from.

    Raises
    ------
    InputError
        For anything that is not a valid protocol, naming the key path, the value and what is allowed.
    """
    if not isinstance(text, str):
        raise InputError(name, type(text).__name__, "YAML text")
    if len(text.encode("utf-8", errors="replace")) > MAX_DOCUMENT_BYTES:
        raise InputError(name, f"{len(text)} characters", f"a protocol of at most {MAX_DOCUMENT_BYTES} bytes")
    doc = load_yaml(text, name)
    return build_protocol(doc, base_dir=base_dir)


def load_protocol(path: str | Path) -> Protocol:
    """Read and validate a protocol file (see :func:`parse_protocol`)."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(str(path), exc.strerror or "unreadable", "a readable protocol file") from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(str(path), "not UTF-8 text", "a YAML file in UTF-8") from None
    protocol = parse_protocol(text, path.name, base_dir=path.parent)
    return _replace(protocol, path=path)


def _replace(obj, **changes):
    import dataclasses

    return dataclasses.replace(obj, **changes)


def protocol_to_yaml(entered: dict[str, Any]) -> str:
    """Write a protocol document (as entered) back to YAML, keys in their given order."""
    return yaml.safe_dump(entered, sort_keys=False, allow_unicode=True, default_flow_style=None, width=100)


def build_protocol(doc: Any, base_dir: Path | None = None) -> Protocol:
    """Validate a parsed protocol document and convert it to SI objects."""
    top = _Section(
        doc,
        "",
        ("schema", "title", "notes", "sample", "container", "solution", "schedule", "environment",
         "nucleation", "cells", "policy"),
        ("schema", "title", "sample", "container", "solution", "schedule"),
    )
    if doc["schema"] != SCHEMA:
        raise InputError("schema", _shown(doc["schema"]), f"exactly {SCHEMA!r}")
    title = top.text("title", 200)
    notes = top.text("notes", 20_000)
    sample = _sample(doc["sample"])
    container = _container(doc["container"], sample)
    solution = _solution(doc["solution"], "solution")
    schedule = _schedule(doc["schedule"], container)
    environment = _environment(doc.get("environment"))
    nucleation = _nucleation(doc.get("nucleation"), base_dir)
    cells = _cells(doc["cells"]) if top.has("cells") else None
    policy = _policy(doc.get("policy"))
    import copy

    return Protocol(
        schema=SCHEMA, title=title, sample=sample, container=container, solution=solution,
        schedule=schedule, environment=environment, nucleation=nucleation, cells=cells, policy=policy,
        notes=notes, entered=copy.deepcopy(doc),
    )


def _sample(node: Any) -> Sample:
    s = _Section(node, "sample", ("volume_ml", "geometry", "diameter_mm", "height_mm", "thickness_mm",
                                  "origin", "description"), ("volume_ml", "geometry"))
    volume = s.number("volume_ml") * 1e-6  # its range, and why: BOUNDS
    geometry = s.word("geometry", GEOMETRIES)
    diameter = s.number("diameter_mm")
    height = s.number("height_mm")
    thickness = s.number("thickness_mm")
    origin = s.word("origin", ORIGINS)
    description = s.text("description", 2000)
    d = diameter * 1e-3 if diameter is not None else None
    h = height * 1e-3 if height is not None else None
    t = thickness * 1e-3 if thickness is not None else None
    if geometry == "sphere":
        for key in ("height_mm", "thickness_mm"):
            if s.has(key):
                raise InputError(f"sample.{key}", node[key], "not used for a sphere (give diameter_mm only)")
        from_volume = (6 * volume / math.pi) ** (1 / 3)
        if d is not None and abs(d / from_volume - 1) > GEOMETRY_TOLERANCE:
            raise InputError("sample.diameter_mm", diameter,
                             f"{from_volume * 1e3:.4g} mm for a {volume * 1e6:g} mL sphere (within 2 %)")
        d = from_volume if d is None else d
    elif geometry == "cylinder":
        if d is None:
            raise InputError("sample.diameter_mm", "missing", "the cylinder's diameter in mm")
        if s.has("thickness_mm"):
            raise InputError("sample.thickness_mm", node["thickness_mm"], "not used for a cylinder")
        from_volume = volume / (math.pi * d**2 / 4)
        if h is not None and abs(h / from_volume - 1) > GEOMETRY_TOLERANCE:
            raise InputError(
                "sample.diameter_mm", diameter,
                f"a diameter that, with height_mm {height:g}, holds volume_ml {volume * 1e6:g} "
                f"(this diameter needs a height of {from_volume * 1e3:.4g} mm; within 2 %)",
            )
        h = from_volume if h is None else h
        if h / d > 1000 or d / h > 1000:
            raise InputError("sample.diameter_mm", diameter,
                             f"a cylinder no flatter or longer than 1000:1 (height is {h * 1e3:.3g} mm)")
    else:
        if t is None:
            raise InputError("sample.thickness_mm", "missing", "the slab's thickness in mm")
        for key in ("diameter_mm", "height_mm"):
            if s.has(key):
                raise InputError(f"sample.{key}", node[key], "not used for a slab (give thickness_mm)")
        face = volume / t
        if math.sqrt(face) < t:
            raise InputError("sample.thickness_mm", thickness,
                             f"a slab thinner than it is wide (at most {math.sqrt(face) * 1e3:.3g} mm "
                             f"for {volume * 1e6:g} mL)")
    return Sample(volume, geometry, d, h, t, origin, description)


def _container(node: Any, sample: Sample) -> Container:
    keys = ("kind", "interface", "shape", "cavity_ml", "inner_diameter_mm", "outer_diameter_mm", "material",
            "trapped_gas_ml", "cavity_compliance_per_gpa")
    c = _Section(node, "container", keys, ("kind",))
    kind = c.word("kind", CONTAINER_KINDS)
    if kind == "open":
        for key in keys[2:]:
            if c.has(key):
                raise InputError(f"container.{key}", node[key], "only for kind: rigid")
        return Container("open", c.word("interface", INTERFACES, "exposed"))
    for key in ("cavity_ml", "inner_diameter_mm", "outer_diameter_mm", "material"):
        if not c.has(key):
            raise InputError(f"container.{key}", "missing", "required for a rigid chamber")
    cavity = c.number("cavity_ml") * 1e-6
    if cavity < sample.volume * (1 - 1e-9):
        raise InputError("container.cavity_ml", node["cavity_ml"],
                         f"at least the sample volume, {sample.volume * 1e6:g} mL")
    inner = c.number("inner_diameter_mm") * 1e-3
    outer = c.number("outer_diameter_mm") * 1e-3
    if outer <= inner:
        raise InputError("container.outer_diameter_mm", node["outer_diameter_mm"],
                         f"larger than inner_diameter_mm ({inner * 1e3:g})")
    material = c.word("material", _data_keys("materials.yaml"))
    gas = c.number("trapped_gas_ml", default=0.0) * 1e-6
    if gas >= cavity:
        raise InputError("container.trapped_gas_ml", node["trapped_gas_ml"],
                         f"less than the cavity, {cavity * 1e6:g} mL")
    compliance = c.number("cavity_compliance_per_gpa")
    interface = c.word("interface", INTERFACES, "exposed" if gas > 0 else "sealed")
    return Container(
        "rigid", interface, c.word("shape", CHAMBER_SHAPES, "cylinder"), cavity, inner, outer, material, gas,
        None if compliance is None else compliance * 1e-9,
    )


def _solution(node: Any, path: str) -> Solution:
    s = _Section(node, path, ("carrier", "cryoprotectants", "critical_cooling_rate_c_per_min",
                              "critical_warming_rate_c_per_min"), ("carrier",))
    carrier = s.word("carrier", CARRIERS)
    entries = []
    for i, item in enumerate(s.items("cryoprotectants", 0, 12)):
        at = f"{path}.cryoprotectants[{i}]"
        e = _Section(item, at, ("agent",) + CONCENTRATION_UNITS, ("agent",))
        units = [u for u in CONCENTRATION_UNITS if u in item]
        if len(units) != 1:
            raise InputError(at, _shown(item), "an agent and exactly one of: " + ", ".join(CONCENTRATION_UNITS))
        agent = item["agent"]
        if not isinstance(agent, str):
            raise InputError(f"{at}.agent", _shown(agent), "an agent name")
        value = e.number(units[0])
        entries.append(Cryoprotectant(agent, units[0], value))
    if len({e.agent for e in entries}) != len(entries):
        raise InputError(f"{path}.cryoprotectants", [e.agent for e in entries], "each agent once")
    from planner.solution import composition

    composition(carrier, [(e.agent, e.unit, e.value) for e in entries], field=path)  # raises on bad values
    ccr = s.number("critical_cooling_rate_c_per_min")
    cwr = s.number("critical_warming_rate_c_per_min")
    return Solution(carrier, tuple(entries), None if ccr is None else ccr / 60.0, None if cwr is None else cwr / 60.0)


def _schedule(node: Any, container: Container) -> Schedule:
    s = _Section(node, "schedule", ("start_c", "steps"), ("start_c", "steps"))
    start_c = s.number("start_c")
    if container.kind == "rigid" and start_c < IH_III_TRIPLE_POINT_C:
        raise InputError("schedule.start_c", start_c, _rigid_coldest())
    steps: list[Step] = []
    current_c = start_c
    total_s = 0.0
    for i, item in enumerate(s.items("steps", 1, 500)):
        at = f"schedule.steps[{i}]"
        if not isinstance(item, dict):
            raise InputError(at, _shown(item), "a step: one of " + ", ".join(STEP_KEYS))
        kinds = [k for k in STEP_KEYS if k in item]
        if len(kinds) != 1:
            unknown = [k for k in item if k not in STEP_KEYS]
            hint = did_you_mean(str(unknown[0]), STEP_KEYS) if unknown and not kinds else None
            raise InputError(at, _shown(item), "exactly one of: " + ", ".join(STEP_KEYS), hint)
        kind = kinds[0]
        if kind == "ramp_to_c":
            e = _Section(item, at, ("ramp_to_c", "rate_c_per_min"), ("ramp_to_c", "rate_c_per_min"))
            target_c = e.number("ramp_to_c")
            rate = e.number("rate_c_per_min")
            if target_c == current_c:
                raise InputError(f"{at}.ramp_to_c", target_c,
                                 f"a temperature other than the current {current_c:g} C (use hold_h to hold)")
            total_s += abs(target_c - current_c) / rate * 60.0
            step = Step(i, "ramp", target_c + CELSIUS_OFFSET, rate / 60.0)
            current_c = target_c
        elif kind in ("hold_h", "hold_min"):
            e = _Section(item, at, (kind,), (kind,))
            if kind == "hold_h":
                duration = e.number("hold_h") * 3600.0
            else:
                duration = e.number("hold_min") * 60.0
            if not steps:
                raise InputError(f"{at}.{kind}", item[kind],
                                 "a hold after a ramp or plunge that brings the sample to its temperature "
                                 "(the sample is taken as equilibrated at start_c)")
            total_s += duration
            step = Step(i, "hold", None, None, duration)
        elif kind == "plunge_to_c":
            e = _Section(item, at, ("plunge_to_c", "heat_transfer", "h_w_per_m2_k"), ("plunge_to_c",))
            target_c = e.number("plunge_to_c")
            preset = e.word("heat_transfer", _data_keys("heat_transfer.yaml"))
            h = e.number("h_w_per_m2_k")
            if preset is not None and h is not None:
                raise InputError(f"{at}.h_w_per_m2_k", h, "either heat_transfer or h_w_per_m2_k, not both")
            step = Step(i, "plunge", target_c + CELSIUS_OFFSET, None, None, preset, h)
            current_c = target_c
        else:
            e = _Section(item, at, ("seed_ice",), ("seed_ice",))
            seed = _Section(item["seed_ice"], f"{at}.seed_ice", ("at_c",), ("at_c",))
            at_c = seed.number("at_c")
            step = Step(i, "seed", at_c + CELSIUS_OFFSET)
        if container.kind == "rigid" and current_c < IH_III_TRIPLE_POINT_C:
            key = "plunge_to_c" if kind == "plunge_to_c" else "ramp_to_c"
            raise InputError(f"{at}.{key}", current_c, _rigid_coldest())
        steps.append(step)
    if total_s > MAX_SCHEDULE_H * 3600.0:
        raise InputError("schedule.steps", f"{total_s / 3600:.0f} h in all",
                         f"a schedule of at most {MAX_SCHEDULE_H:g} h")
    return Schedule(start_c + CELSIUS_OFFSET, tuple(steps))


def _rigid_coldest() -> str:
    return (f"no colder than {IH_III_TRIPLE_POINT_C:.3f} C in a rigid chamber (the ice Ih-III-liquid triple "
            "point: below it ice III forms and the ice Ih models do not apply)")


def _environment(node: Any) -> Environment:
    if node is None:
        return Environment(defaulted=True)
    e = _Section(node, "environment", ("heat_transfer", "h_w_per_m2_k"))
    preset = e.word("heat_transfer", _data_keys("heat_transfer.yaml"))
    h = e.number("h_w_per_m2_k")
    if (preset is None) == (h is None):
        raise InputError("environment", _shown(node), "exactly one of heat_transfer or h_w_per_m2_k")
    return Environment(preset, h, False)


def _nucleation(node: Any, base_dir: Path | None) -> Nucleation:
    if node is None:
        return Nucleation(defaulted=True)
    n = _Section(node, "nucleation", ("preset", "calibration"))
    if n.has("preset") == n.has("calibration"):
        raise InputError("nucleation", _shown(node), "exactly one of preset or calibration")
    if n.has("preset"):
        return Nucleation(n.word("preset", _data_keys("nucleation_presets.yaml") + ["homogeneous-only"]))
    raw = n.text("calibration", 1000)
    path = Path(raw)
    if not path.is_absolute() and base_dir is not None:
        path = base_dir / path
    if not path.is_file():
        raise InputError("nucleation.calibration", raw, "an existing calibration file (relative to the protocol)")
    return Nucleation(None, path)


def _cells(node: Any) -> Cells:
    keys = ("preset", "radius_um", "volume_um3", "inactive_fraction", "lp_um_per_min_atm",
            "lp_activation_kj_per_mol", "permeability_um_per_s", "permeability_activation_kj_per_mol",
            "min_volume_fraction", "max_volume_fraction", "loading", "unloading")
    c = _Section(node, "cells", keys)
    preset = c.word("preset", _data_keys("cells.yaml"))
    radius = c.number("radius_um")
    volume = c.number("volume_um3")
    if radius is not None and volume is not None:
        raise InputError("cells.volume_um3", volume, "either radius_um or volume_um3, not both")
    inactive = c.number("inactive_fraction")
    lp = c.number("lp_um_per_min_atm")
    lp_ea = c.number("lp_activation_kj_per_mol")
    vmin = c.number("min_volume_fraction")
    vmax = c.number("max_volume_fraction")
    if vmin is not None and vmin >= 1.0:
        raise InputError("cells.min_volume_fraction", vmin, "a fraction below 1 (of the isotonic volume)")
    perm: dict[str, float] = {}
    perm_ea: dict[str, float] = {}
    from planner.solution import known_agents

    agents = known_agents()
    for key, target, scale in (("permeability_um_per_s", perm, 1e-6),
                               ("permeability_activation_kj_per_mol", perm_ea, 1e3)):
        if c.has(key):
            sub = node[key]
            if not isinstance(sub, dict):
                raise InputError(f"cells.{key}", _shown(sub), "a mapping of agent: value")
            p = _Section(sub, f"cells.{key}", tuple(agents))
            for agent in sub:
                target[agent] = p.number(agent) * scale
    steps = {}
    for which in ("loading", "unloading"):
        out = []
        for i, item in enumerate(c.items(which, 0, 20)):
            at = f"cells.{which}[{i}]"
            st = _Section(item, at, ("carrier", "cryoprotectants", "temperature_c", "duration_min"),
                          ("carrier", "temperature_c", "duration_min"))
            sol = _solution({k: item[k] for k in ("carrier", "cryoprotectants") if k in item}, at)
            temp = st.number("temperature_c") + CELSIUS_OFFSET
            dur = st.number("duration_min") * 60.0
            out.append(CellStep(i, sol, temp, dur))
        steps[which] = tuple(out)
    return Cells(
        preset=preset,
        radius=None if radius is None else radius * 1e-6,
        volume=None if volume is None else volume * 1e-18,
        inactive_fraction=inactive,
        hydraulic_conductivity=None if lp is None else lp * LP_UM_PER_MIN_ATM,
        hydraulic_activation_energy=None if lp_ea is None else lp_ea * 1e3,
        solute_permeability=perm,
        permeability_activation_energy=perm_ea,
        min_volume_fraction=vmin,
        max_volume_fraction=vmax,
        loading=steps["loading"],
        unloading=steps["unloading"],
    )


# 1 um/(min atm) in m/(Pa s): 1e-6 m / (60 s x 101325 Pa)
LP_UM_PER_MIN_ATM = 1e-6 / (60.0 * 101325.0)


def _policy(node: Any) -> Policy:
    if node is None:
        return Policy()
    p = _Section(node, "policy", ("margins", "target_freeze_probability"))
    target = p.number("target_freeze_probability", default=0.01)
    margins: dict[str, dict[str, float]] = {}
    if p.has("margins"):
        sub = node["margins"]
        names = _data_keys("policy.yaml")
        m = _Section(sub, "policy.margins", tuple(names))
        for name in sub:
            t = _Section(sub[name], f"policy.margins.{name}", ("watch", "stop"), ("watch", "stop"))
            margins[name] = {"watch": t.number("watch"), "stop": t.number("stop")}
        del m
    return Policy(margins, target)
