"""The one bibliography: every source key resolves to authors, year, title, venue and DOI.

Keys are cited as ``[ref:KEY]`` in docstrings, comments and prose, as ``source: KEY`` in data files and
as ``source="KEY"`` in code; ``tests/test_references.py`` checks that every cited key resolves here.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

from planner.errors import InputError, did_you_mean
from planner.yamlio import load_yaml


@dataclass(frozen=True)
class Reference:
    key: str
    authors: str
    year: int | None
    title: str
    venue: str
    doi: str | None = None

    def citation(self) -> str:
        """A one-line citation: authors (year) title. venue. doi."""
        if self.key == "common-practice":
            return "Common practice, no source"
        year = self.year if self.year is not None else "n.d."
        doi = f" doi:{self.doi}" if self.doi else ""
        return f"{self.authors} ({year}). {self.title}. {self.venue}.{doi}"


@lru_cache(maxsize=1)
def bibliography() -> dict[str, Reference]:
    """All references, keyed by source key."""
    text = resources.files("planner").joinpath("data/references.yaml").read_text(encoding="utf-8")
    raw = load_yaml(text, "references.yaml")
    return {
        key: Reference(key, e["authors"], e.get("year"), e["title"], e["venue"], e.get("doi"))
        for key, e in raw.items()
    }


def cite(key: str) -> Reference:
    """Return the reference for ``key``; an unknown key is an error naming the nearest one."""
    refs = bibliography()
    if key not in refs:
        raise InputError("source", key, "a key of planner/data/references.yaml", did_you_mean(key, refs))
    return refs[key]
