"""docs/methods.md, the reference the physics cites, exists and holds every cited section.

The anchors are GitHub's: a heading's text in lower case, spaces as hyphens, punctuation
other than hyphens and underscores dropped.
"""

import re
from pathlib import Path

import pytest

from lakeloss.physics import registry

ROOT = Path(__file__).resolve().parents[2]
DOCUMENT = ROOT / "docs" / "methods.md"
CITING = sorted(
    path
    for path in [
        *ROOT.joinpath("lakeloss").rglob("*.py"),
        *ROOT.joinpath("tests").rglob("*.py"),
        *ROOT.joinpath("demo_layers").glob("*.py"),
        *ROOT.glob("*.md"),
        *ROOT.joinpath("demo_layers").glob("*.md"),
    ]
    if path.name != Path(__file__).name
)


def _anchors() -> set[str]:
    headings = re.findall(r"^#{1,6} (.+)$", DOCUMENT.read_text(encoding="utf-8"), re.MULTILINE)
    return {re.sub(r"[^\w\- ]", "", h.strip().lower()).replace(" ", "-") for h in headings}


def _cited(text: str) -> set[str]:
    # "docs/methods.md#a" and the ", #b" that may follow it in the same citation
    found = set()
    for match in re.finditer(r"docs/methods\.md((?:#[\w\-]+(?:,\s*)?)+)", text):
        found.update(re.findall(r"#([\w\-]+)", match.group(1)))
    return found


def test_every_method_has_a_section():
    anchors = _anchors()
    assert set(registry.method_names()) <= anchors


@pytest.mark.parametrize("path", CITING, ids=lambda p: p.name)
def test_citations_point_to_existing_sections(path):
    text = path.read_text(encoding="utf-8")
    assert "METHODS §" not in text and "METHODS.md" not in text
    assert _cited(text) <= _anchors()


def test_the_physics_cites_the_document():
    cited = set().union(*(_cited(p.read_text(encoding="utf-8")) for p in CITING))
    assert {"saturation-vapour-pressure", "open-questions", "check-values"} <= cited
