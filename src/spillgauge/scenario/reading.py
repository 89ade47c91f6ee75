"""Reading scenarios: TOML text or a parsed dict -> a validated :class:`Scenario`.

:func:`load_scenario` is the only TOML reader; it rejects unknown keys by name
and every value outside its allowed range raises :class:`ScenarioError` naming
the dotted key.
"""

from __future__ import annotations

import dataclasses
import tomllib
import typing
from pathlib import Path

from spillgauge.designs.registry import (
    DESIGN_KINDS,
    check_design,
    default_designs,
    design_kind,
    expand_design_specs,
)
from spillgauge.errors import ScenarioError
from spillgauge.scenario.config import SECTIONS, DesignSpec, Scenario
from spillgauge.scenario.keys import coerce

__all__ = ["load_scenario", "parse_scenario", "validate_scenario", "scenario_to_dict",
           "design_to_dict"]

# ---------------------------------------------------------------------------
# Reading TOML tables into the dataclasses

_SECTIONS = SECTIONS
_TOP_KEYS = {"name", "description", *_SECTIONS, "design"}


def _build(cls: type, table: object, prefix: str, base_dir: Path | None) -> object:
    if not isinstance(table, dict):
        raise ScenarioError(prefix, "a table", table)
    hints = typing.get_type_hints(cls)
    names = {f.name for f in dataclasses.fields(cls)}
    kwargs: dict[str, object] = {}
    for key, value in table.items():
        dotted = f"{prefix}.{key}"
        if key not in names:
            raise ScenarioError(dotted, "a known key (one of " + ", ".join(sorted(names)) + ")",
                                key)
        value = coerce(value, hints[key], dotted)
        if key == "file" and value is not None:
            value = _resolve_file(value, dotted, base_dir)
        kwargs[key] = value
    return cls(**kwargs)


def _design(table: object, index: int) -> tuple[DesignSpec, ...]:
    at = f"design[{index}]"
    if not isinstance(table, dict):
        raise ScenarioError(at, "a table", table)
    if "kind" not in table:
        raise ScenarioError(f"{at}.kind", "present: one of " + ", ".join(
            map(repr, DESIGN_KINDS)), None)
    design_kind(table["kind"], field=f"{at}.kind")
    values = {k: v for k, v in table.items() if k not in ("kind", "label")}
    return expand_design_specs(table["kind"], values, label=table.get("label", ""), index=index)


def validate_scenario(scenario: Scenario) -> Scenario:
    """Check every design against its scenario and return the scenario unchanged.

    Run by :func:`parse_scenario`; call it again after changing a scenario with
    :func:`dataclasses.replace` (the sections re-validate themselves, the designs'
    checks against the market need this).
    """
    for spec in scenario.designs:
        check_design(spec, scenario)
    return scenario


def _resolve_file(value: str, key: str, base_dir: Path | None) -> str:
    path = Path(value).expanduser()
    if not path.is_absolute() and base_dir is not None:
        path = base_dir / path
    if not path.is_file():
        raise ScenarioError(key, "a readable file", value)
    return str(path.resolve())


def parse_scenario(data: dict, *, base_dir: str | Path | None = None,
                   source: str | None = None) -> Scenario:
    """Validate a scenario given as a dict (the parsed TOML) and return it.

    Parameters
    ----------
    data : dict
        The scenario's tables, as :func:`tomllib.loads` returns them.
    base_dir : str or Path, optional
        Folder that relative ``file`` paths are resolved against.
    source : str, optional
        Where the scenario came from, kept for reports.

    Raises
    ------
    ScenarioError
        For an unknown key, a wrong type or a value out of range; ``.field`` names it.

    Examples
    --------
    >>> s = parse_scenario({"name": "tiny", "users": {"count": 50}, "pools": {"count": 4}})
    >>> s.users.count, s.pools.count, [d.label for d in s.designs]
    (50, 4, ['user', 'cluster-pools', 'switchback-24h'])
    """
    if not isinstance(data, dict):
        raise ScenarioError("scenario", "a table of sections", data)
    base = Path(base_dir) if base_dir is not None else None
    for key in data:
        if key not in _TOP_KEYS:
            raise ScenarioError(key if key.strip() else '""', "a known top-level key or "
                                "section (one of "
                                + ", ".join(sorted(_TOP_KEYS)) + ")", key)
    if "name" not in data:
        raise ScenarioError("name", "present (a short name for the scenario)", None)
    name = coerce(data["name"], str, "name")
    description = coerce(data.get("description", ""), str, "description")
    sections = {key: _build(cls, data.get(key, {}), key, base) for key, cls in _SECTIONS.items()}
    users = data.get("users", {})
    if isinstance(users, dict) and "file" in users:
        for key in ("count", "orders_per_week", "rate_shape"):
            if key in users:
                raise ScenarioError(f"users.{key}", "absent when users.file is given "
                                    "(the file sets it)", users[key])
    raw_designs = data.get("design")
    if raw_designs is None:
        pools, users = sections["pools"], sections["users"]
        designs = default_designs(
            n_pools=None if pools.file is not None or users.file is not None else pools.count)
    else:
        if not isinstance(raw_designs, list):
            raise ScenarioError("design", "an array of [[design]] tables", raw_designs)
        designs = tuple(spec for i, table in enumerate(raw_designs) for spec in _design(table, i))
    return validate_scenario(Scenario(name=name, description=description, designs=designs,
                                      source=source, **sections))


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file.

    Parameters
    ----------
    path : str or Path
        A TOML scenario file. Relative ``file`` keys inside it are resolved
        against the file's folder.

    Returns
    -------
    Scenario

    Raises
    ------
    ScenarioError
        If the file is missing or unreadable, is not valid TOML, or holds an
        unknown key or a value out of range.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ScenarioError("scenario", "an existing file", str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ScenarioError("scenario", f"a readable UTF-8 file ({exc.__class__.__name__})",
                            str(path)) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError("scenario", f"valid TOML ({exc})", str(path)) from None
    return parse_scenario(data, base_dir=path.parent, source=str(path))


_LEFT_OUT_AT_DEFAULT = (("users", "basket_value_mean", 1.0), ("users", "basket_value_sd", 0.0),
                        ("study", "outcome", "orders"))
# design keys added after their kinds, left out at their defaults for the same reason
_DESIGN_KEYS_LEFT_OUT_AT_DEFAULT = (("randomization_statistic", "estimate"),)


def scenario_to_dict(scenario: Scenario) -> dict:
    """Return the scenario as plain data; :func:`parse_scenario` reads it back.

    >>> s = parse_scenario({"name": "tiny", "users": {"count": 50}, "pools": {"count": 2}})
    >>> parse_scenario(scenario_to_dict(s)) == s
    True
    """
    out = {"name": scenario.name, "description": scenario.description}
    for key in _SECTIONS:
        out[key] = {k: v for k, v in dataclasses.asdict(getattr(scenario, key)).items()
                    if v is not None}
    users = out["users"]
    # keys added with the study's outcome are left out at their defaults, so a scenario that
    # does not use them keeps its settings (and its results folders' fingerprints)
    for section, key, default in _LEFT_OUT_AT_DEFAULT:
        if out[section].get(key) == default:
            del out[section][key]
    if "file" in users:
        for key in ("count", "orders_per_week", "rate_shape"):
            users.pop(key, None)
    out["design"] = [design_to_dict(d) for d in scenario.designs]
    return out


def design_to_dict(spec: DesignSpec) -> dict:
    """Return a design's table (kind, label and every key its kind declares) as plain data.

    Keys added to a kind after it shipped are left out at their defaults, so a design
    that does not use them keeps its table (and its folders' fingerprints).
    """
    params = spec.params
    for key, default in _DESIGN_KEYS_LEFT_OUT_AT_DEFAULT:
        if key in params and params[key] == default:
            del params[key]
    return {"kind": spec.kind, "label": spec.label, **params}
