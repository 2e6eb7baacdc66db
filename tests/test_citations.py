"""Every citation in the code resolves inside the repository (docs/)."""

from __future__ import annotations

import re

from conftest import ROOT

DOCS = ROOT / "docs"


def _sources() -> str:
    return "\n".join(p.read_text(encoding="utf-8") for p in (ROOT / "pipeline").rglob("*.py"))


def _headings(name: str) -> list[str]:
    return [line for line in (DOCS / name).read_text(encoding="utf-8").splitlines()
            if line.startswith("#")]


def test_references_sections_exist() -> None:
    cited = set(re.findall(r"REFERENCES\s+(\d+(?:\.\d+)?)", _sources()))
    assert len(cited) > 15  # the code cites its sources
    numbers = {m.group(1) for h in _headings("REFERENCES.md")
               if (m := re.match(r"#+\s+(\d+(?:\.\d+)?)\.?\s", h))}
    assert sorted(cited - numbers) == []


def test_design_and_library_notes_sections_exist() -> None:
    src = _sources()
    design = {h.lstrip("# ").strip() for h in _headings("DESIGN.md")}
    for title in set(re.findall(r'DESIGN(?:\.md)?\s+"([^"]+)"', src)):
        assert any(h.startswith(title) for h in design), title
    notes = {m.group(1) for h in _headings("ECOSYSTEM.md")
             if (m := re.match(r"#+\s+(\d+(?:\.\d+)?)\.?\s", h))}
    for sec in set(re.findall(r"ECOSYSTEM\.md\s+§(\d+(?:\.\d+)?)", src)):
        assert sec in notes, sec
