"""The bundled scenarios: where they live, how a name finds one, and the template for a new one."""

from __future__ import annotations

from pathlib import Path

from spillgauge.errors import ScenarioError

__all__ = ["DEFAULT_SCENARIO", "scenarios_dir", "bundled_scenarios", "find_scenario",
           "new_scenario_text"]

DEFAULT_SCENARIO = "tight_pantry"


def scenarios_dir() -> Path:
    """Return the folder of the bundled scenarios."""
    return Path(__file__).parent / "scenarios"


def bundled_scenarios() -> list[Path]:
    """Return the bundled scenario files, sorted by name."""
    return sorted(scenarios_dir().glob("*.toml"))


def find_scenario(name_or_path: str | Path) -> Path:
    """Return a scenario file: an existing path, or the bundled scenario of that name.

    Raises
    ------
    ScenarioError
        When it is neither (the message lists the bundled names).
    """
    path = Path(name_or_path)
    if path.is_file():
        return path
    bundled = scenarios_dir() / f"{path.stem}.toml"
    if path.suffix in ("", ".toml") and path.parent == Path(".") and bundled.is_file():
        return bundled  # a bundled name, with or without .toml
    names = ", ".join(p.stem for p in bundled_scenarios())
    raise ScenarioError("scenario", f"an existing file or a bundled scenario ({names})",
                        str(name_or_path))


def new_scenario_text(name: str) -> str:
    """Return a commented scenario file to start from, named ``name``.

    Raises
    ------
    ScenarioError
        When the name has characters other than letters, digits, '-', '_' and '.'.
    """
    if not name.strip(".") or not all(c.isalnum() or c in "-_." for c in name):
        raise ScenarioError("name", "letters, digits, '-', '_' or '.', not only dots", name)
    template = (scenarios_dir() / "_template.toml.txt").read_text(encoding="utf-8")
    return template.replace("{name}", name)
