"""Scenario configuration: frozen, validated dataclasses, one per scenario section.

A scenario has the sections ``[calendar]``, ``[users]``, ``[pools]``,
``[graph]``, ``[effect]``, ``[study]`` and any number of ``[[design]]`` tables.
Every key is documented in ``docs/scenario.md``; :mod:`spillgauge.scenario.reading`
reads them from TOML.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from spillgauge.errors import ScenarioError

__all__ = [
    "Calendar",
    "Users",
    "Pools",
    "Graph",
    "Effect",
    "Study",
    "DesignSpec",
    "Scenario",
    "DESIGN_KINDS",
    "KIND_KEYS",
    "default_designs",
]

DESIGN_KINDS = ("user", "cluster", "switchback", "interference_test", "rollout")
_STOCKOUT_RULES = ("lost", "substitute")
_GRAPH_MODELS = ("none", "small_world", "pool_blocks", "communities", "edge_list")


def _check(condition: bool, key: str, expected: str, got: object) -> None:
    if not condition:
        raise ScenarioError(key, expected, got)


@dataclass(frozen=True, slots=True, kw_only=True)
class Calendar:
    """The horizon and its demand rhythm."""

    days: int = 28
    tick_hours: int = 1
    diurnal_amplitude: float = 0.0
    daily_shock_sd: float = 0.0
    daily_shock_autocorrelation: float = 0.5

    def __post_init__(self) -> None:
        _check(self.days >= 1, "calendar.days", "an int >= 1", self.days)
        _check(self.tick_hours >= 1 and 24 % self.tick_hours == 0, "calendar.tick_hours",
               "an int >= 1 that divides 24 (1, 2, 3, 4, 6, 8, 12 or 24)", self.tick_hours)
        _check(0.0 <= self.diurnal_amplitude < 1.0, "calendar.diurnal_amplitude",
               "in [0, 1)", self.diurnal_amplitude)
        _check(0.0 <= self.daily_shock_sd <= 1.0, "calendar.daily_shock_sd", "in [0, 1]",
               self.daily_shock_sd)
        _check(-1.0 < self.daily_shock_autocorrelation < 1.0,
               "calendar.daily_shock_autocorrelation", "in (-1, 1)",
               self.daily_shock_autocorrelation)

    @property
    def n_ticks(self) -> int:
        """Number of ticks in the horizon."""
        return self.days * 24 // self.tick_hours

    @property
    def horizon_hours(self) -> int:
        """Length of the horizon in hours."""
        return self.days * 24


@dataclass(frozen=True, slots=True, kw_only=True)
class Users:
    """The population: generated (count, rates) or read from a CSV file."""

    count: int = 10_000
    orders_per_week: float = 2.0
    rate_shape: float = 2.0
    history_days: int = 14
    file: str | None = None

    def __post_init__(self) -> None:
        _check(self.count >= 1, "users.count", "an int >= 1", self.count)
        _check(self.orders_per_week > 0 and math.isfinite(self.orders_per_week),
               "users.orders_per_week", "a finite number > 0", self.orders_per_week)
        _check(self.rate_shape > 0 and math.isfinite(self.rate_shape), "users.rate_shape",
               "a finite number > 0", self.rate_shape)
        _check(self.history_days >= 0, "users.history_days", "an int >= 0", self.history_days)


@dataclass(frozen=True, slots=True, kw_only=True)
class Pools:
    """Stock pools, their restocking and what a stock-out does."""

    count: int = 20
    restock_every_hours: int = 24
    lead_time_hours: int = 0
    stock_cover: float = 1.5
    demand_spread: float = 0.0
    on_stockout: str = "lost"
    substitute_share: float = 0.0
    file: str | None = None

    def __post_init__(self) -> None:
        _check(self.count >= 1, "pools.count", "an int >= 1", self.count)
        _check(self.restock_every_hours >= 1, "pools.restock_every_hours", "an int >= 1",
               self.restock_every_hours)
        _check(0 <= self.lead_time_hours < self.restock_every_hours, "pools.lead_time_hours",
               f"in [0, restock_every_hours={self.restock_every_hours})", self.lead_time_hours)
        _check(self.stock_cover > 0 and math.isfinite(self.stock_cover), "pools.stock_cover",
               "a finite number > 0", self.stock_cover)
        _check(0 <= self.demand_spread <= 3, "pools.demand_spread", "in [0, 3]",
               self.demand_spread)
        _check(self.on_stockout in _STOCKOUT_RULES, "pools.on_stockout",
               "one of " + ", ".join(map(repr, _STOCKOUT_RULES)), self.on_stockout)
        _check(0 <= self.substitute_share <= 1, "pools.substitute_share", "in [0, 1]",
               self.substitute_share)
        if self.on_stockout == "lost":
            _check(self.substitute_share == 0, "pools.substitute_share",
                   "0 when on_stockout = 'lost' (set on_stockout = 'substitute')",
                   self.substitute_share)


@dataclass(frozen=True, slots=True, kw_only=True)
class Graph:
    """The social graph between users."""

    model: str = "none"
    mean_degree: float = 10.0
    within_pool_share: float = 0.9
    community_count: int = 100
    within_community_share: float = 0.9
    rewire_share: float = 0.1
    file: str | None = None

    def __post_init__(self) -> None:
        _check(self.model in _GRAPH_MODELS, "graph.model",
               "one of " + ", ".join(map(repr, _GRAPH_MODELS)), self.model)
        _check(0 <= self.mean_degree <= 1000, "graph.mean_degree", "in [0, 1000]",
               self.mean_degree)
        _check(0 <= self.within_pool_share <= 1, "graph.within_pool_share", "in [0, 1]",
               self.within_pool_share)
        _check(0 <= self.rewire_share <= 1, "graph.rewire_share", "in [0, 1]",
               self.rewire_share)
        _check(self.community_count >= 1, "graph.community_count", "an int >= 1",
               self.community_count)
        _check(0 <= self.within_community_share <= 1, "graph.within_community_share",
               "in [0, 1]", self.within_community_share)
        if self.model == "edge_list":
            _check(self.file is not None, "graph.file",
                   "a CSV path when graph.model = 'edge_list'", self.file)
        elif self.model == "small_world":
            _check(self.mean_degree >= 2, "graph.mean_degree",
                   ">= 2 for a small-world graph", self.mean_degree)


@dataclass(frozen=True, slots=True, kw_only=True)
class Effect:
    """The treatment: own lift, peer lift and carryover."""

    lift: float = 0.1
    peer_lift: float = 0.0
    carryover_half_life_hours: float = 0.0

    def __post_init__(self) -> None:
        _check(-1 < self.lift <= 10, "effect.lift", "in (-1, 10]", self.lift)
        _check(-1 < self.peer_lift <= 10, "effect.peer_lift", "in (-1, 10]", self.peer_lift)
        _check(0 <= self.carryover_half_life_hours <= 10_000,
               "effect.carryover_half_life_hours", "in [0, 10000]",
               self.carryover_half_life_hours)


@dataclass(frozen=True, slots=True, kw_only=True)
class Study:
    """How many replications, from which seed, at which alpha."""

    reps: int = 200
    seed: int = 0
    alpha: float = 0.05

    def __post_init__(self) -> None:
        _check(self.reps >= 1, "study.reps", "an int >= 1", self.reps)
        _check(0 <= self.seed < 2**63, "study.seed", "an int in [0, 2**63)", self.seed)
        _check(0 < self.alpha < 1, "study.alpha", "in (0, 1)", self.alpha)


@dataclass(frozen=True, slots=True, kw_only=True)
class DesignSpec:
    """One ``[[design]]`` table: a randomization rule and the estimator that analyses it.

    Keys by kind (others are refused):

    - ``user``: ``share``, ``randomization`` (``"complete"`` or ``"bernoulli"``), ``adjust``.
    - ``cluster``: ``clusters`` (``"pools"``, ``"graph"``, ``"pools+graph"``),
      ``resolution``, ``share``, ``randomization``, ``estimator``
      (``"hajek"`` or ``"horvitz_thompson"``), ``exposure`` (``"none"`` or
      ``"neighbourhood"``).
    - ``switchback``: ``block_hours``, ``burn_in_hours``, ``per`` (``"market"`` or
      ``"pool"``), ``share``.
    - ``rollout``: ``waves``: pools switch on at random in that many waves after
      an all-control first period; one group of pools never switches.
    - ``interference_test``: ``clusters``, ``resolution``. Half the clusters run a
      user-level experiment, the other half a cluster-level one, and the two
      estimates are compared (Saveski et al. 2017).
    """

    kind: str
    label: str = ""
    share: float = 0.5
    randomization: str = "complete"
    adjust: bool = False
    clusters: str = "pools"
    resolution: float = 1.0
    estimator: str = "hajek"
    exposure: str = "none"
    block_hours: int = 24
    burn_in_hours: int = 0
    per: str = "market"
    waves: int = 4
    index: int = 0

    def __post_init__(self) -> None:
        at = f"design[{self.index}]"
        _check(self.kind in DESIGN_KINDS, f"{at}.kind",
               "one of " + ", ".join(map(repr, DESIGN_KINDS)), self.kind)
        _check(0 < self.share < 1, f"{at}.share", "in (0, 1)", self.share)
        _check(self.randomization in ("complete", "bernoulli"), f"{at}.randomization",
               "'complete' or 'bernoulli'", self.randomization)
        _check(self.clusters in ("pools", "graph", "pools+graph"), f"{at}.clusters",
               "'pools', 'graph' or 'pools+graph'", self.clusters)
        _check(0 < self.resolution <= 100, f"{at}.resolution", "in (0, 100]", self.resolution)
        _check(self.estimator in ("hajek", "horvitz_thompson"), f"{at}.estimator",
               "'hajek' or 'horvitz_thompson'", self.estimator)
        _check(self.exposure in ("none", "neighbourhood"), f"{at}.exposure",
               "'none' or 'neighbourhood'", self.exposure)
        _check(self.block_hours >= 1, f"{at}.block_hours", "an int >= 1", self.block_hours)
        _check(0 <= self.burn_in_hours < self.block_hours, f"{at}.burn_in_hours",
               f"in [0, block_hours={self.block_hours})", self.burn_in_hours)
        _check(self.per in ("market", "pool"), f"{at}.per", "'market' or 'pool'", self.per)
        _check(1 <= self.waves <= 50, f"{at}.waves", "an int in [1, 50]", self.waves)
        if not self.label:
            object.__setattr__(self, "label", self.default_label())

    def default_label(self) -> str:
        """Return a readable label built from the design's parameters."""
        if self.kind == "user":
            return "user-cuped" if self.adjust else "user"
        if self.kind == "cluster":
            label = f"cluster-{self.clusters.replace('+', '-')}"
            if self.clusters != "pools" and self.resolution != 1.0:
                label += f"-r{self.resolution:g}"
            if self.exposure == "neighbourhood":
                label += "-exposure"
            elif self.estimator == "horvitz_thompson":
                label += "-ht"
            return label
        if self.kind == "rollout":
            return f"rollout-{self.waves}-waves"
        if self.kind == "interference_test":
            label = f"interference-test-{self.clusters.replace('+', '-')}"
            if self.clusters != "pools" and self.resolution != 1.0:
                label += f"-r{self.resolution:g}"
            return label
        label = f"switchback-{self.block_hours}h"
        if self.burn_in_hours:
            label += f"-burn{self.burn_in_hours}h"
        if self.per == "pool":
            label += "-per-pool"
        return label


KIND_KEYS = {
    "user": {"kind", "label", "share", "randomization", "adjust"},
    "cluster": {"kind", "label", "share", "randomization", "clusters", "resolution",
                "estimator", "exposure"},
    "switchback": {"kind", "label", "share", "block_hours", "burn_in_hours", "per"},
    "interference_test": {"kind", "label", "clusters", "resolution"},
    "rollout": {"kind", "label", "waves"},
}


def default_designs() -> tuple[DesignSpec, ...]:
    return (
        DesignSpec(kind="user", index=0),
        DesignSpec(kind="cluster", clusters="pools", index=1),
        DesignSpec(kind="switchback", block_hours=24, index=2),
    )


@dataclass(frozen=True, slots=True, kw_only=True)
class Scenario:
    """A validated scenario: the market, the treatment, the study and its designs."""

    name: str
    description: str = ""
    calendar: Calendar = field(default_factory=Calendar)
    users: Users = field(default_factory=Users)
    pools: Pools = field(default_factory=Pools)
    graph: Graph = field(default_factory=Graph)
    effect: Effect = field(default_factory=Effect)
    study: Study = field(default_factory=Study)
    designs: tuple[DesignSpec, ...] = field(default_factory=default_designs)
    source: str | None = None

    def __post_init__(self) -> None:
        _check(isinstance(self.name, str) and self.name.strip() != "", "name",
               "a non-empty string", self.name)
        _check(all(c.isalnum() or c in "-_." for c in self.name), "name",
               "letters, digits, '-', '_' or '.' (it names the results folder)", self.name)
        tick = self.calendar.tick_hours
        for key, hours in (("pools.restock_every_hours", self.pools.restock_every_hours),
                           ("pools.lead_time_hours", self.pools.lead_time_hours)):
            _check(hours % tick == 0, key, f"a multiple of calendar.tick_hours={tick}", hours)
        _check(self.pools.restock_every_hours <= self.calendar.horizon_hours,
               "pools.restock_every_hours",
               f"<= the horizon ({self.calendar.horizon_hours} hours)",
               self.pools.restock_every_hours)
        if self.users.file is None:
            _check(self.pools.count <= self.users.count, "pools.count",
                   f"<= users.count={self.users.count}", self.pools.count)
        labels = [d.label for d in self.designs]
        _check(len(self.designs) >= 1, "design", "at least one [[design]] table", 0)
        for i, spec in enumerate(self.designs):
            at = f"design[{i}]"
            _check(spec.label not in labels[:i], f"{at}.label",
                   "unique among the designs (set label = \"...\" to tell them apart)",
                   spec.label)
            _check(all(c.isalnum() or c in "-_." for c in spec.label), f"{at}.label",
                   "letters, digits, '-', '_' or '.'", spec.label)
            if spec.kind == "switchback":
                for key in ("block_hours", "burn_in_hours"):
                    hours = getattr(spec, key)
                    _check(hours % tick == 0, f"{at}.{key}",
                           f"a multiple of calendar.tick_hours={tick}", hours)
                _check(spec.block_hours * 2 <= self.calendar.horizon_hours,
                       f"{at}.block_hours",
                       f"at most half the horizon ({self.calendar.horizon_hours // 2} hours)",
                       spec.block_hours)
            if spec.kind == "rollout":
                _check(self._has_pools(spec.waves + 1), "pools.count",
                       f">= waves + 1 = {spec.waves + 1} for a staggered rollout ({at})",
                       self.pools.count)
                _check((spec.waves + 1) <= self.calendar.n_ticks, f"{at}.waves",
                       f"at most n_ticks - 1 = {self.calendar.n_ticks - 1}", spec.waves)
            if spec.kind == "interference_test" and spec.clusters == "pools":
                _check(self._has_pools(4), "pools.count",
                       f">= 4 for a test of interference on pools ({at})", self.pools.count)
            if spec.kind in ("cluster", "interference_test") and spec.clusters != "pools" or \
                    spec.exposure != "none":
                _check(self.graph.model != "none", f"{at}.clusters",
                       "'pools' when graph.model = 'none' (graph clusters need a graph)",
                       spec.clusters if spec.exposure == "none" else spec.exposure)

    def _has_pools(self, n_pools: int) -> bool:
        """Whether the market has at least ``n_pools`` pools (files are checked when read)."""
        return self.users.file is not None or self.pools.file is not None or \
            self.pools.count >= n_pools

    def design(self, label: str) -> DesignSpec:
        """Return the design with this label."""
        for spec in self.designs:
            if spec.label == label:
                return spec
        raise ScenarioError("design", "one of " + ", ".join(d.label for d in self.designs), label)
