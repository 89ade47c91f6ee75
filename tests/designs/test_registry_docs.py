"""The key reference in docs/scenario.md is the registry's own declaration, word for word."""

from __future__ import annotations

from pathlib import Path

import spillgauge
from spillgauge.designs.registry import KINDS, key_reference

DOCS = Path(spillgauge.__file__).parents[2] / "docs" / "scenario.md"


def test_scenario_docs_hold_the_generated_key_reference():
    text = DOCS.read_text(encoding="utf-8")
    start = text.index("-->\n\n", text.index("<!-- design keys")) + len("-->\n\n")
    end = text.index("\n<!-- end of design keys -->")
    assert text[start:end] == key_reference(), (
        "docs/scenario.md is out of date: run python docs/generate_key_reference.py")


def test_every_kind_and_key_is_in_the_reference():
    reference = key_reference()
    for name, kind in KINDS.items():
        assert f'`kind = "{name}"`' in reference
        for key in kind.keys:
            assert f"| `{key.name}` |" in reference
