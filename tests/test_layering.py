"""Imports run one way and never in a circle (STYLE.md section 2): every module's imports read with ast.

Function-level imports count as much as top-level ones, and ``from spillgauge
import x`` counts as an import of the module that exports ``x`` (the package's
``__init__`` loads its public names lazily).
"""

from __future__ import annotations

import ast
from pathlib import Path

import spillgauge

ROOT = Path(spillgauge.__file__).parent
BASE = {"errors", "scenario", "schedule", "panel", "seeding", "bundled", "files", "formatting"}
ALLOWED = {
    "base": BASE,
    "market": BASE | {"market"},
    # the engine runs a market under schedules; the market never sees a world
    "worlds": BASE | {"market", "worlds"},
    "estimators": BASE | {"estimators"},
    # a design kind names the estimator that analyses it
    "designs": BASE | {"estimators", "designs"},
    # reading [[design]] tables needs the design kinds' declared keys
    "reading": BASE | {"designs", "estimators"},
    "statistics": BASE | {"statistics"},
    "study": BASE | {"market", "worlds", "designs", "estimators", "reading", "statistics", "study"},
    "sweep": BASE | {"market", "worlds", "designs", "estimators", "reading", "statistics", "study", "sweep"},
    "plan": BASE | {"market", "worlds", "designs", "estimators", "reading", "statistics", "study", "plan"},
    "report": BASE | {"statistics", "study", "sweep", "plan", "report"},
    # the real experiment: a design's draw and analysis, a study's world and metrics
    "experiment": BASE | {"market", "worlds", "designs", "estimators", "reading", "statistics",
                          "study", "experiment"},
}


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(["spillgauge", *parts])


def _layer(path: Path) -> str:
    parts = path.relative_to(ROOT).parts
    if parts == ("scenario", "reading.py"):
        return "reading"
    if parts[0] == "scenario":
        return "base"
    if len(parts) == 1:
        return "cli" if parts[0] in ("cli.py", "__main__.py", "__init__.py") else "base"
    return parts[0]


def _target_layer(module: str) -> str:
    parts = module.split(".")[1:]
    if not parts:
        return "package"
    if parts[:2] == ["scenario", "reading"]:
        return "reading"
    return parts[0] if parts else "cli"


def _imported_modules(path: Path) -> set[str]:
    """Return every spillgauge module the file imports, at any depth of the code."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found |= {a.name for a in node.names if a.name.startswith("spillgauge")}
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and \
                node.module == "spillgauge":
            found |= {spillgauge._EXPORTS.get(a.name, "spillgauge") for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module and \
                node.module.startswith("spillgauge"):
            # "from spillgauge.x import y" may import the module spillgauge.x.y
            found.add(node.module)
            found |= {f"{node.module}.{a.name}" for a in node.names}
    return found


MODULES = {_module_name(p): p for p in ROOT.rglob("*.py") if p.name != "__main__.py"}


def _edges() -> dict[str, set[str]]:
    edges = {}
    for name, path in MODULES.items():
        targets = {m for m in _imported_modules(path) if m in MODULES and m != name}
        edges[name] = targets
    return edges


def test_no_module_imports_upward():
    bad = []
    for path in MODULES.values():
        layer = _layer(path)
        if layer == "cli":
            continue
        for target in _imported_modules(path):
            if target not in MODULES:
                continue
            target_layer = _target_layer(target)
            if target_layer not in ALLOWED[layer]:
                bad.append(f"{path.relative_to(ROOT)} ({layer}) imports {target}")
    assert not bad, "\n".join(bad)


def _cycle(edges: dict[str, set[str]]) -> list[str] | None:
    """Return one import cycle as a list of modules, or None (depth-first search)."""
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        stack.append(node)
        for target in sorted(edges.get(node, ())):
            if state.get(target) == 1:
                return stack[stack.index(target):] + [target]
            if target not in state:
                found = visit(target)
                if found:
                    return found
        stack.pop()
        state[node] = 2
        return None

    for node in sorted(edges):
        if node not in state:
            found = visit(node)
            if found:
                return found
    return None


def test_no_import_cycles():
    # Every module, with its function-level imports, must form an acyclic graph. The
    # package __init__ loads its public names lazily, on first use, so its own edges
    # (to the modules of its exports) are left out.
    edges = {k: v for k, v in _edges().items() if k != "spillgauge"}
    cycle = _cycle(edges)
    assert cycle is None, " -> ".join(cycle)


def test_cycle_detection_finds_a_planted_cycle():
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": set()}) is None


def test_every_module_has_all():
    missing = [str(p.relative_to(ROOT)) for p in ROOT.rglob("*.py")
               if p.name != "__main__.py" and "__all__" not in p.read_text(encoding="utf-8")]
    assert not missing, missing


def test_no_module_is_too_long():
    # STYLE.md section 1: split a module past ~450 lines.
    long = {str(p.relative_to(ROOT)): n for p in ROOT.rglob("*.py")
            if (n := len(p.read_text(encoding="utf-8").splitlines())) > 460}
    assert not long, long


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
