"""Imports run one way (STYLE.md section 2): read every module's imports with ast."""

from __future__ import annotations

import ast
from pathlib import Path

import spillgauge

ROOT = Path(spillgauge.__file__).parent
BASE = {"errors", "scenario", "schedule", "panel", "seeding", "bundled"}
ALLOWED = {
    "base": BASE,
    "model": BASE | {"model"},
    # a design kind names the estimator that analyses it
    "designs": BASE | {"designs", "estimators"},
    "estimators": BASE | {"estimators"},
    "evaluation": BASE | {"model", "designs", "estimators", "evaluation"},
    "report": BASE | {"evaluation", "report"},
    # reading [[design]] tables needs the design kinds' declared keys
    "reading": BASE | {"designs", "estimators"},
}


def _layer(path: Path) -> str:
    parts = path.relative_to(ROOT).parts
    if parts == ("scenario", "reading.py"):
        return "reading"
    if parts[0] == "scenario":
        return "base"
    if len(parts) == 1:
        return "cli" if parts[0] in ("cli.py", "__main__.py", "__init__.py") else "base"
    return parts[0]


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found = set()
    for node in ast.walk(tree):
        names = []
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names = [node.module]
        for name in names:
            if name.startswith("spillgauge."):
                found.add(name.split(".")[1])
    return found


def test_no_module_imports_upward():
    bad = []
    for path in ROOT.rglob("*.py"):
        layer = _layer(path)
        if layer == "cli":
            continue
        for target in _imports(path) - ALLOWED[layer]:
            bad.append(f"{path.relative_to(ROOT)} ({layer}) imports spillgauge.{target}")
    assert not bad, "\n".join(bad)


def test_every_module_has_all():
    missing = [str(p.relative_to(ROOT)) for p in ROOT.rglob("*.py")
               if p.name != "__main__.py" and "__all__" not in p.read_text(encoding="utf-8")]
    assert not missing, missing


def test_public_names_resolve():
    for name in spillgauge.__all__:
        assert getattr(spillgauge, name) is not None


def test_api_page_lists_every_public_name():
    # STYLE.md section 1: the exports and the API page stay in sync.
    page = (ROOT.parents[1] / "docs" / "api.md").read_text(encoding="utf-8")
    listed = set()
    for line in page.splitlines():
        if line.startswith("| `"):
            listed.add(line.split("`")[1].split("(")[0])
    assert listed == set(spillgauge.__all__)
