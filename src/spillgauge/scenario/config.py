"""Scenario configuration: frozen, validated dataclasses, one per scenario section.

A scenario has the sections ``[calendar]``, ``[users]``, ``[pools]``,
``[graph]``, ``[effect]``, ``[study]`` and any number of ``[[design]]`` tables.
Every key is documented in ``docs/scenario.md``; :mod:`spillgauge.scenario.reading`
reads them from TOML.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from spillgauge.errors import ScenarioError
from spillgauge.scenario.keys import check as _check

__all__ = [
    "OUTCOMES",
    "GRAPH_MODEL_KEYS",
    "settings_in_use",
    "Calendar",
    "Users",
    "Pools",
    "Graph",
    "Effect",
    "Study",
    "DesignSpec",
    "Scenario",
    "SECTIONS",
    "CLUSTER_SOURCES",
]

_STOCKOUT_RULES = ("lost", "substitute")
OUTCOMES = ("orders", "conversion", "revenue")  # what the study measures per user
CLUSTER_SOURCES = ("pools", "graph", "pools+graph")  # the clusterings a market offers
_GRAPH_MODELS = ("none", "small_world", "pool_blocks", "communities", "edge_list")
# The [graph] keys each model reads (besides `model`); the others are ignored.
GRAPH_MODEL_KEYS = {"none": (), "small_world": ("mean_degree", "rewire_share"),
                    "pool_blocks": ("mean_degree", "within_pool_share"),
                    "communities": ("mean_degree", "community_count", "within_community_share"),
                    "edge_list": ("file",)}


def settings_in_use(section: str, table: dict) -> dict:
    """Return a section's settings without the keys its other choices make irrelevant.

    >>> settings_in_use("graph", {"model": "none", "mean_degree": 10})
    {'model': 'none'}
    """
    if section == "graph" and table.get("model") in GRAPH_MODEL_KEYS:
        used = ("model", *GRAPH_MODEL_KEYS[table["model"]])
        return {k: v for k, v in table.items() if k in used}
    if section == "pools" and table.get("on_stockout") == "lost":
        return {k: v for k, v in table.items() if k != "substitute_share"}
    return {k: v for k, v in table.items() if v is not None}




@dataclass(frozen=True, slots=True, kw_only=True)
class Calendar:
    """The horizon and its demand rhythm."""

    days: int = 28
    tick_hours: int = 1
    diurnal_amplitude: float = 0.0
    daily_shock_sd: float = 0.0
    daily_shock_autocorrelation: float = 0.5
    trend_per_week: float = 0.0

    def __post_init__(self) -> None:
        _check(1 <= self.days <= 36_500, "calendar.days", "an int in [1, 36500]", self.days)
        _check(self.tick_hours >= 1 and 24 % self.tick_hours == 0, "calendar.tick_hours",
               "an int >= 1 that divides 24 (1, 2, 3, 4, 6, 8, 12 or 24)", self.tick_hours)
        _check(0.0 <= self.diurnal_amplitude < 1.0, "calendar.diurnal_amplitude",
               "in [0, 1)", self.diurnal_amplitude)
        _check(0.0 <= self.daily_shock_sd <= 1.0, "calendar.daily_shock_sd", "in [0, 1]",
               self.daily_shock_sd)
        _check(-1.0 < self.daily_shock_autocorrelation < 1.0,
               "calendar.daily_shock_autocorrelation", "in (-1, 1)",
               self.daily_shock_autocorrelation)
        _check(-0.5 <= self.trend_per_week <= 1.0, "calendar.trend_per_week", "in [-0.5, 1]",
               self.trend_per_week)

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
    basket_value_mean: float = 1.0
    basket_value_sd: float = 0.0
    file: str | None = None

    def __post_init__(self) -> None:
        _check(1 <= self.count <= 10**10, "users.count", "an int in [1, 1e10]", self.count)
        _check(0 < self.basket_value_mean <= 1e9, "users.basket_value_mean", "in (0, 1e9]",
               self.basket_value_mean)
        _check(0 <= self.basket_value_sd <= 1e9, "users.basket_value_sd", "in [0, 1e9]",
               self.basket_value_sd)
        _check(0 < self.orders_per_week <= 10_000, "users.orders_per_week", "in (0, 10000]",
               self.orders_per_week)
        _check(0.001 <= self.rate_shape <= 1e6, "users.rate_shape", "in [0.001, 1e6]",
               self.rate_shape)
        _check(0 <= self.history_days <= 36_500, "users.history_days", "an int in [0, 36500]",
               self.history_days)


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
    shock_sd: float = 0.0
    shock_autocorrelation: float = 0.0
    factor_count: int = 0
    factor_sd: float = 0.0
    file: str | None = None

    def __post_init__(self) -> None:
        _check(self.count >= 1, "pools.count", "an int >= 1", self.count)
        _check(0.0 <= self.shock_sd <= 1.0, "pools.shock_sd", "in [0, 1]", self.shock_sd)
        _check(-1.0 < self.shock_autocorrelation < 1.0, "pools.shock_autocorrelation",
               "in (-1, 1)", self.shock_autocorrelation)
        _check(0 <= self.factor_count <= 10, "pools.factor_count", "an int in [0, 10]",
               self.factor_count)
        _check(0.0 <= self.factor_sd <= 0.5, "pools.factor_sd", "in [0, 0.5]", self.factor_sd)
        if self.factor_sd > 0:
            _check(self.factor_count >= 1, "pools.factor_count",
                   f">= 1 when pools.factor_sd = {self.factor_sd:g} > 0", self.factor_count)
        _check(1 <= self.restock_every_hours <= 876_000, "pools.restock_every_hours",
               "an int in [1, 876000]", self.restock_every_hours)
        _check(0 <= self.lead_time_hours < self.restock_every_hours, "pools.lead_time_hours",
               f"in [0, restock_every_hours={self.restock_every_hours})", self.lead_time_hours)
        _check(0 < self.stock_cover <= 1000, "pools.stock_cover", "in (0, 1000]",
               self.stock_cover)
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
        else:  # a file the model would not read is refused, not silently ignored
            _check(self.file is None, "graph.file", "left out unless graph.model = 'edge_list' "
                   f"(graph.model is {self.model!r})", self.file)
        if self.model == "small_world":
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
    outcome: str = "orders"

    def __post_init__(self) -> None:
        _check(self.outcome in OUTCOMES, "study.outcome", "one of " + ", ".join(
            f'"{o}"' for o in OUTCOMES), self.outcome)
        _check(1 <= self.reps <= 1_000_000, "study.reps", "an int in [1, 1000000]", self.reps)
        _check(0 <= self.seed < 2**63, "study.seed", "an int in [0, 2**63)", self.seed)
        _check(0 < self.alpha < 1, "study.alpha", "in (0, 1)", self.alpha)


@dataclass(frozen=True, slots=True, kw_only=True)
class DesignSpec:
    """One ``[[design]]`` table: a design kind, its label and its values.

    The keys each kind accepts, their defaults and allowed values are declared
    by the kind (see :mod:`spillgauge.designs`); a spec built by
    :func:`spillgauge.designs.make_design_spec` or read from a scenario file
    holds every declared key. Values are read as attributes (``spec.share``).

    Parameters
    ----------
    kind : str
        The design kind, e.g. ``"cluster"``.
    label : str
        Unique label of the design in its scenario.
    values : tuple of (str, object) pairs
        Every declared key of the kind with its value, in declaration order.
    index : int
        Position of the table in the scenario file (names it in error messages).
    """

    kind: str
    label: str
    values: tuple[tuple[str, object], ...] = ()
    index: int = 0

    def __getattr__(self, name: str) -> object:
        for key, value in object.__getattribute__(self, "values"):
            if key == name:
                return value
        raise AttributeError(f"a {object.__getattribute__(self, 'kind')!r} design has no "
                             f"key {name!r}")

    @property
    def params(self) -> dict[str, object]:
        """Return the declared keys and their values."""
        return dict(self.values)

    @property
    def at(self) -> str:
        """Return the table's name in error messages, e.g. ``"design[2]"``."""
        return f"design[{self.index}]"


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
    designs: tuple[DesignSpec, ...] = ()
    source: str | None = None

    def __post_init__(self) -> None:
        _check(isinstance(self.name, str) and self.name.strip() != "", "name",
               "a non-empty string", self.name)
        _check(all(c.isalnum() or c in "-_." for c in self.name) and self.name.strip(".") != "",
               "name", "letters, digits, '-', '_' or '.', not only dots (it names the results "
               "folder)", self.name)
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

    def has_pools(self, n_pools: int) -> bool:
        """Whether the market has at least ``n_pools`` pools (files are checked when read)."""
        return self.users.file is not None or self.pools.file is not None or \
            self.pools.count >= n_pools

    def design(self, label: str) -> DesignSpec:
        """Return the design with this label."""
        for spec in self.designs:
            if spec.label == label:
                return spec
        raise ScenarioError("design", "one of " + ", ".join(d.label for d in self.designs), label)


SECTIONS = {"calendar": Calendar, "users": Users, "pools": Pools, "graph": Graph,
            "effect": Effect, "study": Study}  # the scenario's sections, in file order
