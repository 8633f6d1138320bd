"""Every source key cited anywhere in the project resolves in the one bibliography."""

import re
from pathlib import Path

import pytest

from planner.references import bibliography, cite

ROOT = Path(__file__).resolve().parents[1]
# [ref:KEY] in prose and code, source: KEY in data files, source="KEY" / source_key="KEY" in code
PATTERNS = [
    re.compile(r"\[ref:([a-z0-9][a-z0-9-]*)\]"),
    re.compile(r"^\s*-?\s*source:\s*([a-z0-9][a-z0-9-]*)\s*$", re.M),
    re.compile(r"\bsource(?:_key)?\s*=\s*[\"']([a-z0-9][a-z0-9-]*)[\"']"),
]
FILES = [
    p
    for d in ("planner", "tests", "benchmarks", "protocols")
    for p in (ROOT / d).rglob("*")
    if p.suffix in {".py", ".yaml", ".md", ".csv"} and ".venv" not in p.parts
] + [p for p in (ROOT / "README.md", ROOT / "DEVELOPERS.md") if p.exists()]


def cited_keys():
    found = set()
    for path in FILES:
        text = path.read_text(encoding="utf-8", errors="replace")
        for pat in PATTERNS:
            if pat is PATTERNS[1] and path.suffix not in {".yaml", ".csv"}:
                continue  # "source: KEY" is the data-file form; in Python it is a type annotation
            for key in pat.findall(text):
                if key != "key":  # the word used in this module's own explanations
                    found.add((key, path.relative_to(ROOT).as_posix()))
    return sorted(found)


def test_bibliography_entries_are_complete():
    refs = bibliography()
    assert len(refs) > 40
    for key, ref in refs.items():
        assert re.fullmatch(r"[a-z0-9][a-z0-9-]*", key), key
        assert ref.title and ref.venue and ref.authors, key


@pytest.mark.parametrize(("key", "where"), cited_keys())
def test_cited_key_resolves(key, where):
    assert key in bibliography(), f"{where} cites unknown source {key!r}"


def test_unknown_key_names_nearest():
    with pytest.raises(ValueError, match="koop-2000"):
        cite("koop-200")
