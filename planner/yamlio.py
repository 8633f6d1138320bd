"""Strict YAML reading for protocol and data files: duplicate keys and non-finite numbers are refused."""

from __future__ import annotations

import math
from typing import Any

import yaml

from planner.errors import InputError

# libyaml's parser when PyYAML was built with it (about 5x quicker on the packaged data files, which the
# app reads while its first page is built); the constructors, and so every check below, are the same.
_BASE = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


class _StrictLoader(_BASE):
    """SafeLoader that refuses duplicate mapping keys (YAML allows them; a planner must not)."""


def _construct_mapping(loader: _StrictLoader, node: yaml.MappingNode, deep: bool = False) -> dict:
    loader.flatten_mapping(node)
    mapping: dict[Any, Any] = {}
    for key_node, value_node in node.value:
        key = loader.construct_object(key_node, deep=deep)
        try:
            hash(key)
        except TypeError:
            raise InputError(f"line {key_node.start_mark.line + 1}", key, "a plain word as a key") from None
        if key in mapping:
            raise InputError(
                f"line {key_node.start_mark.line + 1}", key, "each key once per mapping", "duplicate key"
            )
        mapping[key] = loader.construct_object(value_node, deep=deep)
    return mapping


def _construct_float(loader: _StrictLoader, node: yaml.ScalarNode) -> float:
    value = yaml.SafeLoader.construct_yaml_float(loader, node)
    if not math.isfinite(value):
        raise InputError(f"line {node.start_mark.line + 1}", node.value, "a finite number")
    return value


_StrictLoader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _construct_mapping)
_StrictLoader.add_constructor("tag:yaml.org,2002:float", _construct_float)


def load_yaml(text: str, what: str = "document") -> Any:
    """Parse YAML text strictly; any syntax error becomes an :class:`InputError` naming ``what``."""
    try:
        return yaml.load(text, Loader=_StrictLoader)  # noqa: S506 - a SafeLoader subclass
    except InputError:
        raise
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f"{what} line {mark.line + 1}" if mark is not None else what
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise InputError(where, problem, "well-formed YAML") from None
    except (RecursionError, ValueError, TypeError, OverflowError) as exc:
        raise InputError(what, type(exc).__name__, "well-formed YAML") from None
