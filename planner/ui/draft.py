"""The protocol being drafted in the app: the document as entered, addressed by key paths.

A draft is the nested mapping a protocol file holds (lab units in its keys: ``volume_ml``, ``hold_h``).
Fields read and write it by key path (``solution.cryoprotectants[0].value``), exactly the paths the
protocol loader names in its errors, so an error lands next to the field that caused it. Nothing typed is
converted or dropped here: text that is not a number stays text, and the loader refuses it in its own words.
"""

from __future__ import annotations

import copy
import re
from collections.abc import Iterator
from typing import Any

from planner.errors import InputError

_PART = re.compile(r"([^.\[\]]+)|\[(\d+)\]")


def split_path(path: str) -> list[str | int]:
    """Split ``a.b[2].c`` into ``["a", "b", 2, "c"]``.

    An empty path, a stray bracket or an empty segment is an :class:`InputError` naming the path.
    """
    parts: list[str | int] = []
    pos = 0
    text = str(path)
    while pos < len(text):
        if text[pos] == "." and parts:
            pos += 1
        m = _PART.match(text, pos)
        if m is None or m.start() != pos:
            raise InputError("field", path, "a key path such as sample.volume_ml or steps[0].target_c")
        parts.append(m.group(1) if m.group(1) is not None else int(m.group(2)))
        pos = m.end()
    if not parts:
        raise InputError("field", path, "a key path such as sample.volume_ml or steps[0].target_c")
    return parts


def join_path(parts: list[str | int]) -> str:
    """Inverse of :func:`split_path`."""
    out = ""
    for p in parts:
        if isinstance(p, int):
            out += f"[{p}]"
        else:
            out += ("." if out else "") + p
    return out


def parse_entry(text: str) -> Any:
    """Turn what a person typed into the value stored in the draft.

    A number becomes a float (an integer when written without a point or exponent); an empty box becomes
    ``None`` (the key is then absent from the file); anything else stays the text as typed, so the
    protocol loader refuses it with its own message naming the field.
    """
    s = str(text).strip().replace("\u2212", "-")
    if s == "":
        return None
    if re.fullmatch(r"[+-]?\d+", s):
        return int(s)
    try:
        value = float(s)
    except ValueError:
        return str(text).strip()
    return value


def format_entry(value: Any) -> str:
    """The text a field shows for a stored value (the inverse of :func:`parse_entry`)."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return repr(value)  # the shortest text that reads back as exactly this number
    return str(value)


class Draft:
    """A protocol document as entered, with get/set by key path and no silent change.

    Parameters
    ----------
    document : dict
        The parsed protocol file (or an empty mapping for a blank protocol). It is deep-copied.
    """

    def __init__(self, document: dict[str, Any] | None = None):
        self._doc: dict[str, Any] = copy.deepcopy(document) if document else {}

    @property
    def document(self) -> dict[str, Any]:
        """A deep copy of the document, with empty entries removed (what a saved file holds)."""
        return _prune(copy.deepcopy(self._doc))

    def get(self, path: str, default: Any = None) -> Any:
        node: Any = self._doc
        for part in split_path(path):
            try:
                node = node[part]
            except (KeyError, IndexError, TypeError):
                return default
        return node

    def has(self, path: str) -> bool:
        sentinel = object()
        return self.get(path, sentinel) is not sentinel

    def set(self, path: str, value: Any) -> None:
        """Store ``value`` at ``path``, creating mappings on the way; ``None`` keeps the key, empty."""
        parts = split_path(path)
        node: Any = self._doc
        for i, part in enumerate(parts[:-1]):
            nxt = parts[i + 1]
            if isinstance(part, int):
                if not isinstance(node, list) or part >= len(node):
                    raise InputError(join_path(parts[: i + 1]), part, f"an existing row (0 to {len(node) - 1})")
                if node[part] is None:
                    node[part] = [] if isinstance(nxt, int) else {}
                node = node[part]
            else:
                if not isinstance(node, dict):
                    raise InputError(join_path(parts[:i]), type(node).__name__, "a mapping")
                if node.get(part) is None:
                    node[part] = [] if isinstance(nxt, int) else {}
                node = node[part]
        last = parts[-1]
        if isinstance(last, int):
            if not isinstance(node, list) or last >= len(node):
                raise InputError(path, last, "an existing row")
            node[last] = value
        else:
            if not isinstance(node, dict):
                raise InputError(join_path(parts[:-1]), type(node).__name__, "a mapping")
            node[last] = value

    def remove(self, path: str) -> None:
        """Remove a key or a list row (a row's later neighbours move up by one)."""
        parts = split_path(path)
        parent = self.get(join_path(parts[:-1])) if len(parts) > 1 else self._doc
        last = parts[-1]
        if isinstance(last, int) and isinstance(parent, list) and last < len(parent):
            del parent[last]
        elif isinstance(last, str) and isinstance(parent, dict):
            parent.pop(last, None)

    def append(self, path: str, row: Any) -> int:
        """Append ``row`` to the list at ``path`` (created if absent); returns its index."""
        rows = self.get(path)
        if rows is None:
            self.set(path, [])
            rows = self.get(path)
        if not isinstance(rows, list):
            raise InputError(path, type(rows).__name__, "a list of rows")
        rows.append(copy.deepcopy(row))
        return len(rows) - 1

    def leaves(self, prefix: str = "") -> Iterator[tuple[str, Any]]:
        """Every (key path, value) of scalar entries under ``prefix``, in document order."""
        start = self.get(prefix) if prefix else self._doc
        yield from _walk(start, split_path(prefix) if prefix else [])

    def copy(self) -> Draft:
        return Draft(self._doc)


def _walk(node: Any, parts: list[str | int]) -> Iterator[tuple[str, Any]]:
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _walk(v, [*parts, str(k)])
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _walk(v, [*parts, i])
    else:
        yield join_path(parts), node


def _prune(node: Any) -> Any:
    """Drop ``None`` entries and mappings left empty (an empty box means "not given")."""
    if isinstance(node, dict):
        out = {}
        for k, v in node.items():
            v = _prune(v)
            if v is None or (isinstance(v, dict) and not v):
                continue
            out[k] = v
        return out
    if isinstance(node, list):
        return [_prune(v) for v in node]
    return node


def blank_like(document: dict[str, Any]) -> dict[str, Any]:
    """The same keys as ``document`` with every value emptied and one row per list (a blank protocol).

    Choice words that structure the document (``schema``) are kept, so the blank names its format.
    """

    def empty(node: Any, key: str | None) -> Any:
        if isinstance(node, dict):
            return {k: empty(v, k) for k, v in node.items()}
        if isinstance(node, list):
            return [empty(node[0], None)] if node else []
        return node if key in {"schema"} else None

    return empty(copy.deepcopy(document), None)
