"""The repository is self-contained: every document that code, tests and guides cite is in it.

Reference: the repository's own file tree (what a clone contains).
"""
from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SOURCES = [p for folder in ("optimizer", "tests", "benchmarks", "docs", "models", "tasks")
           for p in (ROOT / folder).rglob("*") if p.suffix in (".py", ".md", ".yaml", ".toml")]
SOURCES += [ROOT / name for name in ("README.md", "DEVELOPERS.md", "pyproject.toml")]
DOC = re.compile(r"docs/([\w-]+\.md)")
SECTION = re.compile(r"docs/formulation\.md,? sections? (\d+)(?:\s*(?:-|and)\s*(\d+))?")
# Spelled in pieces so this file does not match itself.
OUTSIDE = ["/" + "work/", "../" + "shared", "FORMULATION" + ".md", "PLAN_" + "FORMAT.md", "STYLE" + ".md"]


def texts():
    for path in SOURCES:
        if path.is_file():
            yield path, path.read_text(encoding="utf-8", errors="replace")


def test_cited_documents_exist():
    missing = {(str(p.relative_to(ROOT)), name) for p, text in texts() for name in DOC.findall(text)
               if not (ROOT / "docs" / name).is_file()}
    assert not missing


def test_cited_formulation_sections_exist():
    headings = set(re.findall(r"^## (\d+)\. ", (ROOT / "docs" / "formulation.md").read_text(), re.M))
    cited = {(str(p.relative_to(ROOT)), n) for p, text in texts() for match in SECTION.findall(text)
             for n in match if n}
    assert cited, "nothing cites docs/formulation.md by section"
    assert {c for c in cited if c[1] not in headings} == set()


def test_no_reference_to_files_outside_the_repository():
    found = [(str(p.relative_to(ROOT)), word) for p, text in texts() for word in OUTSIDE if word in text]
    assert found == []
