"""The planner's state without widgets: the draft, the current step, the last valid assessment.

:class:`PlannerModel` is what the plan notebook drives and what the headless tests drive. Every change goes
through :meth:`PlannerModel.set_value` (or a row/step method) and is assessed at once; a refused value
leaves the last valid assessment in place, marked stale, with the loader's own message stored against the
field's key path. Nothing typed is ever dropped: moving between steps only changes ``step``.
"""

from __future__ import annotations

import copy
import os
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import traitlets

from planner.errors import InputError, PlannerError, choice_error
from planner.ui import steps as step_registry
from planner.ui.draft import Draft, blank_like, join_path, parse_entry, split_path
from planner.ui.summary import MarginRow, margin_rows, verdict_of
from planner.ui.work import Worker

PROTOCOL_ENV = "COLDMARGIN_PROTOCOL"  # the protocol the app opens with (a file path)
PROTOCOL_DIR_ENV = "COLDMARGIN_PROTOCOL_DIR"  # the folder of demo protocols
ARCHIVE_ENV = "COLDMARGIN_ARCHIVE"  # the archive the sign step proposes
KEY_ENV = "COLDMARGIN_KEY"  # the key file the sign step proposes
MAX_UPLOAD_BYTES = 1_000_000
CACHE_SIZE = 16  # assessed drafts kept, so flipping a value back shows its result at once


def demo_directory() -> Path | None:
    """Folder of demo protocols: ``$COLDMARGIN_PROTOCOL_DIR``, the folder of ``$COLDMARGIN_PROTOCOL``,
    or ``protocols/`` of the source tree."""
    if os.environ.get(PROTOCOL_DIR_ENV):
        return Path(os.environ[PROTOCOL_DIR_ENV])
    if os.environ.get(PROTOCOL_ENV):
        return Path(os.environ[PROTOCOL_ENV]).resolve().parent
    here = Path(__file__).resolve().parents[2] / "protocols"
    return here if here.is_dir() else None


def demo_files() -> dict[str, Path]:
    """Demo protocols by name (file stem), sorted."""
    folder = demo_directory()
    if folder is None or not folder.is_dir():
        return {}
    return {p.stem: p for p in sorted(folder.glob("*.yaml"))}


@dataclass(frozen=True)
class Evaluation:
    """What one assessment run produced: the protocol, the Assessment object and its JSON form."""

    protocol: Any
    assessment: Any
    report: dict[str, Any]


def installed_sections() -> tuple[str, ...]:
    """The assessment's sections whose modules are installed, in the assessment's order.

    A section that is not installed is left out of the assessment (and so out of the app) rather than
    taking the whole plan down.
    """
    import importlib.util

    from planner.assessment import SECTION_ORDER

    return tuple(n for n in SECTION_ORDER if importlib.util.find_spec(f"planner.sections.{n}") is not None)


def default_evaluate(document: dict[str, Any], name: str, base_dir: Path | None) -> Evaluation:
    """Validate the document with the protocol loader and assess it (the app's only path to numbers)."""
    from planner.assessment import assess
    from planner.protocol import parse_protocol, protocol_to_yaml

    protocol = parse_protocol(protocol_to_yaml(document), name, base_dir=base_dir)
    assessment = assess(protocol, sections=installed_sections())
    return Evaluation(protocol, assessment, assessment.to_dict())


def _file_stamp(document: dict[str, Any], base_dir: Path | None) -> str:
    """Size and time of a calibration file the document names, so an edited file is assessed anew."""
    name = (document.get("nucleation") or {}).get("calibration") if isinstance(document, dict) else None
    if not isinstance(name, str):
        return ""
    path = Path(name) if Path(name).is_absolute() or base_dir is None else base_dir / name
    try:
        st = path.stat()
    except OSError:
        return ":missing"
    return f":{st.st_size}:{st.st_mtime_ns}"


class PlannerModel(traitlets.HasTraits):
    """State of the plan notebook.

    Parameters
    ----------
    evaluate : callable, optional
        ``evaluate(document, name, base_dir) -> Evaluation``; defaults to the protocol loader plus
        :func:`planner.assessment.assess`.
    inline : bool
        Assess in the calling thread (tests); the app assesses on a worker thread.
    """

    step = traitlets.Unicode("sample")
    revision = traitlets.Int(0)  # bumps on every change of the draft
    result_revision = traitlets.Int(0)  # bumps whenever a new assessment (or error) has arrived
    working = traitlets.Bool(False)
    stale = traitlets.Bool(False)
    field_errors = traitlets.Dict()  # key path -> message in the loader's own words
    message = traitlets.Unicode("")  # an error that belongs to no single field
    source_name = traitlets.Unicode("blank")  # where the draft came from (demo name, file name, blank)

    def __init__(self, evaluate: Callable[..., Evaluation] | None = None, inline: bool = False, **kwargs):
        super().__init__(**kwargs)
        self._evaluate = evaluate or default_evaluate
        self._cache: OrderedDict[tuple[str, str, str], Evaluation] = OrderedDict()
        self.worker = Worker(inline=inline)
        self.draft = Draft()
        self.base_dir: Path | None = None
        self.evaluation: Evaluation | None = None
        self.evaluated_revision = -1  # draft revision the current evaluation belongs to
        self.visited: set[str] = {self.step}

    # --- where the draft comes from ------------------------------------------------------------------

    def load_demo(self, name: str) -> None:
        demos = demo_files()
        if name not in demos:
            raise choice_error("demo", name, list(demos))
        self.load_path(demos[name])

    def load_path(self, path: str | os.PathLike) -> None:
        path = Path(path)
        try:
            text = path.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise InputError(str(path), getattr(exc, "strerror", None) or type(exc).__name__,
                             "a readable protocol file in UTF-8") from None
        self._load_text(text, path.stem, path.parent)

    def load_upload(self, filename: str, content: bytes) -> None:
        """Start from an uploaded protocol file (its bytes, as the upload widget gives them)."""
        if len(content) > MAX_UPLOAD_BYTES:
            raise InputError(filename, f"{len(content)} bytes", f"a protocol file of at most {MAX_UPLOAD_BYTES} bytes")
        try:
            text = bytes(content).decode("utf-8")
        except UnicodeDecodeError:
            raise InputError(filename, "not UTF-8 text", "a YAML protocol file in UTF-8") from None
        self._load_text(text, Path(filename).stem, Path.cwd())

    def _load_text(self, text: str, name: str, base_dir: Path | None) -> None:
        from planner.yamlio import load_yaml

        document = load_yaml(text, name)
        if not isinstance(document, dict):
            raise InputError(name, type(document).__name__, "a protocol: a YAML mapping with schema, title, …")
        self.draft = Draft(document)
        self.base_dir = base_dir
        self.source_name = name
        self._loaded = self.draft.document
        self._reset_results()
        self._changed()

    def start_blank(self) -> None:
        """A blank protocol with the demo's keys and no values (every required key shows its error)."""
        demos = demo_files()
        skeleton: dict[str, Any] = {"schema": "coldmargin/protocol-1"}
        if demos:
            from planner.yamlio import load_yaml

            skeleton = blank_like(load_yaml(next(iter(demos.values())).read_text(encoding="utf-8"), "demo"))
        self.draft = Draft(skeleton)
        self.base_dir = Path.cwd()
        self.source_name = "blank"
        self._loaded = self.draft.document
        self._reset_results()
        self._changed()

    @property
    def edited(self) -> bool:
        """True when the draft differs from what was opened (replacing it would lose typed work)."""
        return self.draft.document != getattr(self, "_loaded", {})

    def _reset_results(self) -> None:
        self.evaluation = None
        self.evaluated_revision = -1
        self.stale = False
        self.field_errors = {}
        self.message = ""

    # --- editing -------------------------------------------------------------------------------------

    def value(self, path: str) -> Any:
        return self.draft.get(path)

    def set_value(self, path: str, value: Any) -> None:
        """Set one entry. Text is read as a number where it is one; anything else is kept as typed."""
        stored = parse_entry(value) if isinstance(value, str) else value
        if self.draft.get(path) == stored and self.draft.has(path):
            return
        self.draft.set(path, stored)
        self._changed()

    def add_row(self, list_path: str, kind: str | None = None) -> int:
        rows = self._rows_spec(list_path)
        names = [k.name for k in rows.kinds]
        chosen = rows.kinds[0] if kind is None else next((k for k in rows.kinds if k.name == kind), None)
        if chosen is None:
            raise choice_error(f"{list_path} (new row)", kind, names)
        index = self.draft.append(list_path, copy.deepcopy(chosen.template))
        self._changed()
        return index

    def remove_row(self, row_path: str) -> None:
        parts = split_path(row_path)
        list_path = join_path(parts[:-1])
        spec = self._rows_spec(list_path)
        rows = self.draft.get(list_path) or []
        if len(rows) <= spec.min_rows:
            raise InputError(list_path, f"{len(rows)} row(s)", f"at least {spec.min_rows} row(s)")
        self.draft.remove(row_path)
        self._changed()

    def move_row(self, row_path: str, offset: int) -> None:
        parts = split_path(row_path)
        list_path, index = join_path(parts[:-1]), parts[-1]
        rows = self.draft.get(list_path) or []
        target = int(index) + offset
        if not (0 <= target < len(rows)):
            return
        rows[index], rows[target] = rows[target], rows[index]
        self._changed()

    def set_unit(self, row_path: str, unit_key: str) -> None:
        """Change a row's unit key (``mass_percent`` → ``molal``), keeping the number as entered."""
        spec = self._rows_spec(join_path(split_path(row_path)[:-1]))
        if unit_key not in spec.unit_keys:
            raise choice_error(f"{row_path} unit", unit_key, spec.unit_keys)
        row = self.draft.get(row_path)
        if not isinstance(row, dict):
            raise InputError(row_path, type(row).__name__, "a row")
        current = [k for k in spec.unit_keys if k in row]
        if current == [unit_key]:
            return
        value = row.pop(current[0]) if current else None
        for k in current[1:]:
            row.pop(k)
        # keep the key order of the row: the unit key goes where the old one was (after the agent)
        items = list(row.items())
        row.clear()
        row.update(items[:1])
        row[unit_key] = value
        row.update(items[1:])
        self._changed()

    def unit_of_row(self, row_path: str) -> str | None:
        spec = self._rows_spec(join_path(split_path(row_path)[:-1]))
        row = self.draft.get(row_path) or {}
        return next((k for k in spec.unit_keys if k in row), None)

    def include(self, optional_path: str, on: bool) -> None:
        """Add or remove an optional part (the cells block); its last content comes back when re-added."""
        if on and not self.draft.has(optional_path):
            kept = getattr(self, "_removed", {}).get(optional_path)
            self.draft.set(optional_path, kept if kept is not None else {"preset": None})
        elif not on and self.draft.has(optional_path):
            self._removed = {**getattr(self, "_removed", {}), optional_path: self.draft.get(optional_path)}
            self.draft.remove(optional_path)
        else:
            return
        self._changed()

    def _rows_spec(self, list_path: str) -> step_registry.Rows:
        import re

        pattern = re.sub(r"\[\d+\]", "[]", list_path)
        for s in step_registry.STEPS:
            for item in s.items:
                if isinstance(item, step_registry.Rows) and re.sub(r"\[\d+\]", "[]", item.path) == pattern:
                    return item
        raise InputError("list", list_path, "a list the planner edits as rows")

    # --- moving between steps ------------------------------------------------------------------------

    @property
    def step_names(self) -> list[str]:
        return step_registry.step_names()

    def go(self, name: str) -> None:
        step_registry.step(name)  # refuses unknown names
        self.step = name
        self.visited.add(name)

    def next(self) -> None:
        names = self.step_names
        i = names.index(self.step)
        if i + 1 < len(names):
            self.go(names[i + 1])

    def back(self) -> None:
        names = self.step_names
        i = names.index(self.step)
        if i > 0:
            self.go(names[i - 1])

    # --- assessing -----------------------------------------------------------------------------------

    def _changed(self) -> None:
        self.revision += 1
        self.assess()

    def assess(self) -> None:
        """Assess the current draft (on the worker); the result or error arrives in :meth:`_done`."""
        revision = self.revision
        document = self.draft.document
        name = self.source_name or "protocol"
        base_dir = self.base_dir
        self.working = True
        self.worker.submit(
            lambda: self.evaluate_cached(document, name, base_dir),
            lambda ev: self._done(revision, ev),
            lambda exc: self._failed(revision, exc),
        )

    def evaluate_cached(self, document: dict[str, Any], name: str, base_dir: Path | None) -> Evaluation:
        """Assess a document, reusing the result for a document seen before (changing a number and back)."""
        import json

        # JSON keeps 1 and 1.0 apart as the loader does; a draft holds only JSON's kinds of value
        try:
            text = json.dumps(document, sort_keys=True, allow_nan=True, default=repr)
        except TypeError:  # keys of mixed kinds (a number typed as a key): the loader will name it
            import yaml

            text = yaml.safe_dump(document, sort_keys=True)
        key = (text, name, str(base_dir) + _file_stamp(document, base_dir))
        hit = self._cache.get(key)
        if hit is not None:
            self._cache.move_to_end(key)
            return hit
        evaluation = self._evaluate(document, name, base_dir)
        self._cache[key] = evaluation
        while len(self._cache) > CACHE_SIZE:
            self._cache.popitem(last=False)
        return evaluation

    def wait(self, timeout: float = 60.0) -> None:
        self.worker.wait(timeout)

    def _done(self, revision: int, evaluation: Evaluation) -> None:
        self.evaluation = evaluation
        self.evaluated_revision = revision
        self.field_errors = {}
        self.message = ""
        self.stale = False
        self.working = False
        self.result_revision += 1

    def _failed(self, revision: int, exc: BaseException) -> None:
        if isinstance(exc, InputError):
            exc = self._on_empty_box(exc)
            self.field_errors = {exc.field: str(exc)}
            self.message = "" if self._field_shown(exc.field) else str(exc)
        elif isinstance(exc, PlannerError):
            self.field_errors = {}
            self.message = str(exc)
        else:
            self.field_errors = {}
            self.message = f"The planner could not assess this protocol ({type(exc).__name__}: {exc})."
        self.stale = self.evaluation is not None
        self.working = False
        self.result_revision += 1

    def _on_empty_box(self, exc: InputError) -> InputError:
        """A row refused as a whole because its boxes are all still empty (a row just added), or a whole
        block left out (a blank protocol's ``sample``), is refused at its first box instead, in the
        loader's words for a missing value: the person sees the error beside the box to fill. Any other
        error is returned as it is."""
        import re

        if exc.value == "missing" and re.fullmatch(r"[a-z_]+", exc.field):
            # a whole block left out (a blank protocol): the error goes to the block's first box on show
            for s in step_registry.STEPS:
                for item in s.items:
                    if (isinstance(item, step_registry.Field) and item.path.startswith(exc.field + ".")
                            and (item.shown is None or item.shown(self.draft))):
                        return InputError(item.path, "missing", exc.allowed)
            return exc
        m = re.fullmatch(r"(.+)\[(\d+)\]", exc.field)
        if m is None:
            return exc
        try:
            spec = self._rows_spec(m.group(1))
        except InputError:
            return exc
        row = self.draft.get(exc.field)
        kind = spec.kind_of(row)
        if kind is None or not isinstance(row, dict):
            return exc
        boxes = [f"{exc.field}.{f.path}" for f in kind.fields]
        if any(self.draft.get(b) is not None for b in boxes):
            return exc  # something is typed: the loader's own words for the row stand
        return InputError(boxes[0], "missing", "a value is required")

    def _field_shown(self, path: str) -> bool:
        return self.step_of_error(path) is not None

    def step_of_error(self, path: str) -> str | None:
        """The step whose inputs hold ``path`` (or a row or block containing it)."""
        import re

        pattern = re.sub(r"\[\d+\]", "[]", path)
        for s in step_registry.STEPS:
            for item in s.items:
                p = re.sub(r"\[\d+\]", "[]", item.path)
                if pattern == p or pattern.startswith(p + ".") or pattern.startswith(p + "["):
                    return s.name
        top = pattern.split(".")[0].split("[")[0]
        for s in step_registry.STEPS:
            if any(re.sub(r"\[\d+\]", "[]", i.path).split(".")[0] == top for i in s.items):
                return s.name
        return None

    def error_for(self, path: str) -> str | None:
        """The message for a field: its own error, or that of the row it sits in."""
        if path in self.field_errors:
            return self.field_errors[path]
        return None

    def errors_within(self, prefix: str) -> list[str]:
        """Messages whose key path is ``prefix`` itself or lies inside it (a row, a block)."""
        return [m for p, m in self.field_errors.items()
                if p == prefix or p.startswith(prefix + ".") or p.startswith(prefix + "[")]

    @property
    def report(self) -> dict[str, Any] | None:
        """The last valid assessment as JSON types (None before the first valid draft)."""
        return self.evaluation.report if self.evaluation else None

    @property
    def assessment(self) -> Any:
        return self.evaluation.assessment if self.evaluation else None

    @property
    def protocol(self) -> Any:
        return self.evaluation.protocol if self.evaluation else None

    @property
    def current(self) -> bool:
        """True when the shown assessment belongs to the draft as it is now."""
        return self.evaluation is not None and self.evaluated_revision == self.revision and not self.working

    def margins(self) -> list[MarginRow]:
        return margin_rows(self.report)

    def verdict(self) -> tuple[str, list[str]]:
        return verdict_of(self.report)

    # --- output --------------------------------------------------------------------------------------

    def protocol_yaml(self) -> str:
        """The draft as a protocol file (what "download" gives), exactly as entered."""
        from planner.protocol import protocol_to_yaml

        return protocol_to_yaml(self.draft.document)

    def download_name(self) -> str:
        stem = "".join(c if c.isalnum() or c in "-_" else "-" for c in (self.source_name or "protocol"))
        return f"{stem or 'protocol'}.yaml"
