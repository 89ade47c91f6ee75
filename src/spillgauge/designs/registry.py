"""The design registry: one line per design kind; everything else looks kinds up here.

Adding a design kind = one module with a :class:`~spillgauge.designs.kind.DesignKind`
subclass, one line in :data:`KINDS`, and tests (the contract test runs over
every registered kind by itself).
"""

from __future__ import annotations

from collections.abc import Mapping

from spillgauge.designs.cluster_level import ClusterLevel
from spillgauge.designs.interference import InterferenceTestDesign
from spillgauge.designs.kind import MIN_CLUSTERS_PER_ARM, DesignKind, clusters_per_arm
from spillgauge.designs.rollout import Rollout
from spillgauge.designs.switchback import Switchback
from spillgauge.designs.user_level import UserLevel
from spillgauge.errors import ScenarioError
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.keys import coerce

__all__ = ["KINDS", "DESIGN_KINDS", "design_kind", "kind_of", "make_design_spec",
           "check_design", "default_designs", "key_reference"]

KINDS: Mapping[str, DesignKind] = {kind.name: kind for kind in (
    UserLevel(),
    ClusterLevel(),
    Switchback(),
    InterferenceTestDesign(),
    Rollout(),
)}

DESIGN_KINDS = tuple(KINDS)


def _one_of() -> str:
    return "one of " + ", ".join(map(repr, DESIGN_KINDS))


def design_kind(name: object, *, field: str = "design.kind") -> DesignKind:
    """Return the registered kind called ``name``; :class:`ScenarioError` naming ``field`` if none."""
    if not isinstance(name, str) or name not in KINDS:
        raise ScenarioError(field, _one_of(), name)
    return KINDS[name]


def kind_of(spec: DesignSpec) -> DesignKind:
    """Return the kind of a design spec."""
    return design_kind(spec.kind, field=f"{spec.at}.kind")


def make_design_spec(kind: str, values: Mapping[str, object] | None = None, /, *,
                     label: object = "", index: int = 0, **more: object) -> DesignSpec:
    """Return a validated :class:`DesignSpec`: declared keys checked, defaults filled.

    Parameters
    ----------
    kind : str
        A registered design kind.
    label : str, optional
        The design's label; by default the kind's readable label.
    index : int
        Position of the ``[[design]]`` table (names it in error messages).
    values : mapping, optional
        Keys the kind declares (a ``[[design]]`` table without ``kind`` and
        ``label``); any other key is refused by name.
    **more
        More keys, as keywords.

    Raises
    ------
    ScenarioError
        For an unknown kind or key, a wrong type or a value out of range.

    Examples
    --------
    >>> spec = make_design_spec("switchback", block_hours=12)
    >>> spec.label, spec.block_hours, spec.share
    ('switchback-12h', 12, 0.5)
    >>> make_design_spec("user", blocks=3)
    Traceback (most recent call last):
    ...
    spillgauge.errors.ScenarioError: design[0].blocks must be a known key (one of adjust, kind, label, randomization, share); got 'blocks'
    """
    at = f"design[{index}]"
    values = {**(values or {}), **more}
    design = design_kind(kind, field=f"{at}.kind")
    declared = {key.name: key for key in design.keys}
    for name in values:
        if name not in declared:
            raise ScenarioError(f"{at}.{name}", "a known key (one of " + ", ".join(
                sorted({"kind", "label", *declared})) + ")", name)
    checked = tuple((key.name, key.validate(values[key.name], f"{at}.{key.name}")
                     if key.name in values else key.default) for key in design.keys)
    spec = DesignSpec(kind=kind, label="", values=checked, index=index)
    label = coerce(label, str, f"{at}.label") or design.default_label(spec)
    return DesignSpec(kind=kind, label=label, values=checked, index=index)


def check_design(spec: DesignSpec, scenario: Scenario) -> None:
    """Check a design against its scenario (the kind's own checks), naming the key."""
    kind_of(spec).check(spec, scenario)


def default_designs(n_pools: int | None = None) -> tuple[DesignSpec, ...]:
    """Return the designs of a scenario without ``[[design]]`` tables.

    The pool design is left out when ``n_pools`` pools cannot hold two per arm
    (a cluster-robust variance needs them); ``None`` means the count is not known
    yet (pools read from a file).

    >>> [spec.label for spec in default_designs(n_pools=3)]
    ['user', 'switchback-24h']
    """
    designs = [make_design_spec("user", index=0)]
    cluster = make_design_spec("cluster", clusters="pools", index=1)
    if n_pools is None or clusters_per_arm(n_pools, cluster.share,
                                           cluster.randomization) >= MIN_CLUSTERS_PER_ARM:
        designs.append(cluster)
    designs.append(make_design_spec("switchback", block_hours=24, index=len(designs)))
    return tuple(designs)


def key_reference() -> str:
    """Return the Markdown reference of every design kind's keys (kept in ``docs/scenario.md``)."""
    lines = []
    for design in KINDS.values():
        lines += [f"### `kind = \"{design.name}\"`", "", design.summary[0].upper()
                  + design.summary[1:] + ".", "", "| key | type | default | allowed | meaning |",
                  "|---|---|---|---|---|"]
        for key in design.keys:
            default = f'"{key.default}"' if isinstance(key.default, str) else \
                str(key.default).lower() if isinstance(key.default, bool) else repr(key.default)
            lines.append(f"| `{key.name}` | {key.type.__name__} | `{default}` | "
                         f"{key.expected()} | {key.doc} |")
        lines.append("")
    return "\n".join(lines).rstrip() + "\n"
