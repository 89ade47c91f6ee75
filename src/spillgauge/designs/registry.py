"""The design registry: one line per design kind; everything else looks kinds up here.

Adding a design kind = one module with a :class:`~spillgauge.designs.kind.DesignKind`
subclass, one line in :data:`KINDS`, and tests (the contract test runs over
every registered kind by itself).
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping

from spillgauge.designs.cluster_level import ClusterLevel
from spillgauge.designs.interference import InterferenceTestDesign
from spillgauge.designs.kind import MIN_CLUSTERS_PER_ARM, DesignKind, clusters_per_arm
from spillgauge.designs.opt_in import OptIn
from spillgauge.designs.regional_launch import RegionalLaunch
from spillgauge.designs.rollout import Rollout
from spillgauge.designs.switchback import Switchback
from spillgauge.designs.switchback_minimax import SwitchbackMinimax
from spillgauge.designs.user_level import UserLevel
from spillgauge.errors import ScenarioError
from spillgauge.formatting import format_value
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.keys import coerce

__all__ = ["KINDS", "DESIGN_KINDS", "design_kind", "kind_of", "make_design_spec",
           "expand_design_specs", "check_design", "default_designs", "key_reference",
           "MAX_VARIANTS"]

MAX_VARIANTS = 64  # combinations one [[design]] table may expand into

KINDS: Mapping[str, DesignKind] = {kind.name: kind for kind in (
    UserLevel(),
    ClusterLevel(),
    Switchback(),
    InterferenceTestDesign(),
    Rollout(),
    SwitchbackMinimax(),
    OptIn(),
    RegionalLaunch(),
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
    spillgauge.errors.ScenarioError: design[0].blocks must be a known key (one of adjust, inference, kind, label, permutations, pre_period_strata, randomization, randomization_statistic, share, strata); got 'blocks'
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


def _tuned_values(design: DesignKind, values: Mapping[str, object], at: str
                  ) -> dict[str, list]:
    """Return the keys given as lists (tuned values), each checked: numeric, non-empty, unique."""
    declared = {key.name: key for key in design.keys}
    tuned = {}
    for name, value in values.items():
        if not isinstance(value, list):
            continue
        key = declared.get(name)
        if key is None:
            continue  # make_design_spec names the unknown key
        if not key.is_numeric:
            raise ScenarioError(f"{at}.{name}", f"{key.expected()} (only numeric keys take a "
                                "list of values)", value)
        if not value:
            raise ScenarioError(f"{at}.{name}", "a non-empty list of values", value)
        checked = [key.validate(v, f"{at}.{name}") for v in value]
        if len(set(checked)) != len(checked):
            raise ScenarioError(f"{at}.{name}", "a list of distinct values", value)
        tuned[name] = checked
    return tuned


def _shown_in_label(name: str, combos: list[dict], labels: list[str]) -> bool:
    """Whether variants that differ only in ``name`` get different labels."""
    groups: dict[tuple, set[str]] = {}
    sizes: dict[tuple, int] = {}
    for combo, label in zip(combos, labels):
        rest = tuple(sorted((k, v) for k, v in combo.items() if k != name))
        groups.setdefault(rest, set()).add(label)
        sizes[rest] = sizes.get(rest, 0) + 1
    return all(len(groups[k]) == sizes[k] for k in groups)


def expand_design_specs(kind: str, values: Mapping[str, object] | None = None, /, *,
                        label: object = "", index: int = 0) -> tuple[DesignSpec, ...]:
    """Return one validated spec per combination of the values given as lists (tuned keys).

    A numeric key given as a list (``block_hours = [6, 12, 24]``) expands into one
    design per value, and several such keys into one per combination, in the
    order written. Each variant's label shows its values: the kind's readable
    label when it already tells the variants apart, else ``-<key><value>``
    appended for each tuned key it does not show (always, after an explicit
    ``label``). Without a list this is ``(make_design_spec(...),)``.

    Examples
    --------
    >>> [s.label for s in expand_design_specs("switchback", {"block_hours": [12, 24]})]
    ['switchback-12h', 'switchback-24h']
    >>> [s.label for s in expand_design_specs("user", {"share": [0.2, 0.5]})]
    ['user-share0.2', 'user-share0.5']
    """
    at = f"design[{index}]"
    values = dict(values or {})
    design = design_kind(kind, field=f"{at}.kind")
    tuned = _tuned_values(design, values, at)
    if not tuned:
        return (make_design_spec(kind, values, label=label, index=index),)
    n_variants = 1
    for options in tuned.values():
        n_variants *= len(options)
    if n_variants > MAX_VARIANTS:
        raise ScenarioError(f"{at}", f"at most {MAX_VARIANTS} combinations of listed values",
                            n_variants)
    combos = [dict(zip(tuned, c)) for c in itertools.product(*tuned.values())]
    specs = [make_design_spec(kind, {**values, **combo}, label=label, index=index)
             for combo in combos]
    named = coerce(label, str, f"{at}.label")
    labels = [spec.label for spec in specs]
    hidden = [name for name in tuned if named or not _shown_in_label(name, combos, labels)]
    return tuple(DesignSpec(kind=spec.kind, values=spec.values, index=index,
                            label=spec.label + "".join(
                                f"-{name.replace('_', '-')}{format_value(combo[name])}"
                                for name in hidden))
                 for spec, combo in zip(specs, combos))


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
