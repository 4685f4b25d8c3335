"""The docstrings' method references point at docs/methods.md, and at headings that exist there.

Code cites the methods document as ``docs/methods.md, '<section title>'`` (several titles joined by
"and"), the title being a heading of docs/methods.md without its number. These tests fail when code
still cites the old shared note ("METHODS.md section N", which is not part of the project), when a
cited title is not a heading, or when an anchor that docs/methods.md states is not the one GitHub
generates for its heading (GitHub's rule: lower-case the heading, drop every character that is not
a letter, digit, space, hyphen or underscore, and turn spaces into hyphens; common practice, no
source).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
METHODS = ROOT / "docs" / "methods.md"
CODE_DIRS = ("sim", "gui")

_HEADING = re.compile(r"^(?P<level>#{1,6})\s+(?P<text>.+?)\s*#*\s*$", re.MULTILINE)
_NUMBER = re.compile(r"^\d+(?:\.\d+)*\.\s+")
_REFERENCE = re.compile(r"docs/methods\.md,[\s#]*'(?P<first>[^'\n]+)'(?P<more>(?:\s*and\s*'[^'\n]+')*)")


def _code_files() -> list[Path]:
    return sorted(p for d in CODE_DIRS for p in (ROOT / d).rglob("*.py"))


def _headings(text: str) -> list[tuple[int, str]]:
    """(level, heading text) of every Markdown heading outside fenced code blocks."""
    kept, fenced = [], False
    for line in text.splitlines():
        if line.lstrip().startswith("```"):
            fenced = not fenced
        elif not fenced:
            kept.append(line)
    return [(len(m.group("level")), m.group("text")) for m in _HEADING.finditer("\n".join(kept))]


def section_titles(text: str) -> set[str]:
    """Titles a reference may name: section and subsection headings without their number."""
    return {_NUMBER.sub("", heading) for level, heading in _headings(text) if level in (2, 3)}


def cited_titles(text: str) -> list[tuple[int, str]]:
    """(line, title) of every ``docs/methods.md, '<title>'`` reference in ``text``; the titles may
    follow the comma on the next line (also after a comment's ``#``) and several may be joined by
    "and"."""
    out = []
    for m in _REFERENCE.finditer(text):
        line = text.count("\n", 0, m.start()) + 1
        out.append((line, m.group("first")))
        out += [(line, t) for t in re.findall(r"'([^'\n]+)'", m.group("more"))]
    return out


def github_anchor(heading: str) -> str:
    """The anchor GitHub gives a heading (before any ``-1`` suffix for repeated headings)."""
    kept = "".join(ch for ch in heading.strip().lower() if ch.isalnum() or ch in " -_")
    return kept.replace(" ", "-")


def test_methods_document_exists_with_unique_section_titles():
    text = METHODS.read_text(encoding="utf-8")
    titles = [_NUMBER.sub("", h) for level, h in _headings(text) if level == 2]
    assert len(titles) >= 10, f"docs/methods.md should have its numbered sections, found {titles}"
    assert len(titles) == len(set(titles)), f"section titles must be unique: {titles}"


def test_stated_anchors_are_the_ones_github_generates():
    text = METHODS.read_text(encoding="utf-8")
    anchors = {github_anchor(h) for _, h in _headings(text)}
    stated = set(re.findall(r"\]\(#([^)\s]+)\)", text)) | set(re.findall(r"`#([a-z0-9_-]+)`", text))
    assert stated, "docs/methods.md should state the anchors of its sections"
    wrong = sorted(stated - anchors)
    assert not wrong, f"anchors stated in docs/methods.md that match no heading: {wrong}"


def test_code_does_not_cite_the_old_shared_note():
    stale = [f"{p.relative_to(ROOT)}:{i}: {line.strip()}"
             for p in _code_files()
             for i, line in enumerate(p.read_text(encoding="utf-8").splitlines(), 1)
             if "METHODS.md" in line]
    assert not stale, ("cite docs/methods.md, '<section title>' instead of METHODS.md (not part of the "
                       "project):\n" + "\n".join(stale))


def test_every_methods_reference_names_an_existing_heading():
    titles = section_titles(METHODS.read_text(encoding="utf-8"))
    bad = [f"{p.relative_to(ROOT)}:{line}: '{title}'"
           for p in _code_files()
           for line, title in cited_titles(p.read_text(encoding="utf-8"))
           if title not in titles]
    assert not bad, ("these references name no heading of docs/methods.md (headings: "
                     f"{sorted(titles)}):\n" + "\n".join(bad))


@pytest.mark.parametrize(("text", "expected"), [
    ("(docs/methods.md, 'Hazards and survival'; Bender et al. 2005)", [(1, "Hazards and survival")]),
    ("sampling (docs/methods.md,\n    'Rates, risks and units').", [(1, "Rates, risks and units")]),
    ("    # left truncation, docs/methods.md,\n    # 'Hazards and survival').", [(1, "Hazards and survival")]),
    ("x\n(docs/methods.md, 'Exact solution' and 'Cycle-based cohort traces')",
     [(2, "Exact solution"), (2, "Cycle-based cohort traces")]),
    ("see docs/methods.md for the formulas", []),
])
def test_reference_reader(text, expected):
    # the reader the check above relies on: wrapped lines, comments, several titles, no title
    assert cited_titles(text) == expected


def test_heading_reader_and_anchor_rule():
    text = "# Title\n\n## 2. Rates, risks and units\n\n```\n## not a heading\n```\n### Kaplan-Meier\n"
    assert section_titles(text) == {"Rates, risks and units", "Kaplan-Meier"}
    assert github_anchor("2. Rates, risks and units") == "2-rates-risks-and-units"
    assert github_anchor("10. Discretization-error study") == "10-discretization-error-study"
