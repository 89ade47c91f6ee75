"""Rewrite the design-key block of docs/scenario.md from the registry's declarations.

Run after adding or changing a design kind's keys::

    python docs/generate_key_reference.py

``tests/designs/test_registry_docs.py`` fails until the block matches.
"""

from __future__ import annotations

from pathlib import Path

from spillgauge.designs.registry import key_reference

DOCS = Path(__file__).with_name("scenario.md")
START, END = "<!-- design keys", "\n<!-- end of design keys -->"


def main() -> None:
    text = DOCS.read_text(encoding="utf-8")
    start = text.index("-->\n\n", text.index(START)) + len("-->\n\n")
    end = text.index(END)
    DOCS.write_text(text[:start] + key_reference() + text[end:], encoding="utf-8")


if __name__ == "__main__":
    main()
