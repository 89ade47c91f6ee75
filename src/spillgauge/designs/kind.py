"""What a design kind declares: its keys, how it draws a schedule and how it is analysed.

Every design kind is one module holding one subclass of :class:`DesignKind`
and one line in :mod:`spillgauge.designs.registry`. The rest of spillgauge
(scenario reading, the study, the recommendation, the report) asks the
registry and never branches on a kind's name.

A kind draws from a :class:`MarketView`, the few questions a design may ask of
a market (how many users, each user's pool, cluster labels, neighbourhood
incidences), never the market itself.
"""

from __future__ import annotations

import dataclasses
import importlib
from typing import ClassVar, Protocol

import numpy as np
from scipy import sparse

from spillgauge.estimators.estimate import Estimate
from spillgauge.estimators.randomization import RANDOMIZATION_STATISTICS, randomization_p_value
from spillgauge.panel import OutcomePanel
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.config import CLUSTER_SOURCES
from spillgauge.scenario.keys import DesignKey, check
from spillgauge.schedule import RANDOMIZATIONS, AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = [
    "INFERENCES",
    "MIN_CLUSTERS_PER_ARM",
    "DesignKind",
    "MarketView",
    "check_clusters_per_arm",
    "check_graph_clusters",
    "cluster_label",
    "cluster_source_key",
    "clusters_per_arm",
    "describe_clusters",
    "inference_keys",
    "randomization_key",
    "resolution_key",
    "share_key",
]

MIN_CLUSTERS_PER_ARM = 2  # a cluster-robust variance needs two clusters in each arm
INFERENCES = ("analytic", "randomization")


class MarketView(Protocol):
    """What a design may ask of a market (:class:`~spillgauge.market.build.Market` answers)."""

    @property
    def n_users(self) -> int: ...

    @property
    def n_ticks(self) -> int: ...

    @property
    def tick_hours(self) -> int: ...

    @property
    def pool_of_user(self) -> np.ndarray: ...

    @property
    def history(self) -> np.ndarray: ...

    @property
    def rate_per_hour(self) -> np.ndarray: ...

    @property
    def carryover_half_life_hours(self) -> float: ...

    def clusters(self, source: str = "pools", *, resolution: float = 1.0) -> np.ndarray: ...

    def neighbourhood_clusters(self, source: str = "pools", *, resolution: float = 1.0
                               ) -> sparse.csr_array: ...


class DesignKind:
    """Base class of a design kind; subclasses fill the class attributes and methods.

    Class attributes
    ----------------
    name : str
        The ``kind`` value in a ``[[design]]`` table.
    summary : str
        One line for the key reference.
    keys : tuple of DesignKey
        The keys the kind accepts besides ``kind`` and ``label``.
    shown_keys : tuple of str
        Keys always named when the design is described (others only when off their
        default).
    estimand : str
        What the design's estimate targets (``"gte"`` for randomized designs); its
        truth in each replication comes from :meth:`truth`.
    question : str
        The estimand in words, for the report.
    is_recommendable : bool
        Whether the recommendation may choose it (a diagnostic or a launch may not).
    is_randomized : bool
        Whether the design randomizes (False for a launch: the report shows it apart,
        in "if you do not randomize").
    is_user_level : bool
        Whether units are single users: the recommendation measures other designs'
        spillover against it.
    keeps_switch_profile : bool
        Whether the report draws its effect by ticks since a switch.
    compares_periods : bool
        Whether its estimator compares periods of time (a switchback's blocks, a
        rollout's pool-periods), so it reads the outcome's flow per period; the
        report then says what a per-user outcome such as conversion is per period.
    needs_user_days : bool
        Whether its analysis reads each user's orders per day
        (``OutcomePanel.fulfilled`` / ``demanded``). Worlds keep those tables only
        when a design, plan or report declares the need; per-user totals and the
        per-pool tick tables are always there.
    """

    name: ClassVar[str] = ""
    summary: ClassVar[str] = ""
    keys: ClassVar[tuple[DesignKey, ...]] = ()
    shown_keys: ClassVar[tuple[str, ...]] = ()
    estimand: ClassVar[str] = "gte"
    question: ClassVar[str] = "the global treatment effect (GTE)"
    is_recommendable: ClassVar[bool] = True
    is_randomized: ClassVar[bool] = True
    is_user_level: ClassVar[bool] = False
    keeps_switch_profile: ClassVar[bool] = False
    compares_periods: ClassVar[bool] = False
    needs_user_days: ClassVar[bool] = False

    def analysis_clusters(self, spec: DesignSpec, scenario: Scenario) -> int:
        """Return how many clusters its analysis's CR2 variance sees (0: few enough to ignore).

        The memory estimate counts that variance's per-cluster sums and block-tick arrays.
        """
        return 0

    def check(self, spec: DesignSpec, scenario: Scenario) -> None:
        """Raise :class:`~spillgauge.errors.ScenarioError` when the spec cannot run in the scenario.

        The declared keys are already valid one by one; this checks them against
        each other and against the market (tick length, pool count, graph).
        """

    def default_label(self, spec: DesignSpec) -> str:
        """Return a readable label built from the design's values."""
        return self.name

    def describe_unit(self, spec: DesignSpec) -> str:
        """Return the randomization unit in words, e.g. ``"stock pool"``."""
        raise NotImplementedError

    def estimator_name(self, spec: DesignSpec) -> str:
        """Return the full name of the estimator that analyses the design."""
        raise NotImplementedError

    def prepare(self, market: MarketView, spec: DesignSpec) -> None:
        """Build what the design needs from the market once (clusters), before workers start."""

    def draw(self, market: MarketView, spec: DesignSpec, *, rng: np.random.Generator
             ) -> AssignmentSchedule:
        """Draw one assignment schedule of the design in a market."""
        raise NotImplementedError

    def truth(self, spec: DesignSpec, schedule: AssignmentSchedule, panel: OutcomePanel,
              control: OutcomePanel) -> tuple[float, float]:
        """Return the truth of the design's estimand in one replication, and a side effect.

        Only kinds whose ``estimand`` is not ``"gte"`` are asked (the GTE comes from
        the two counterfactual worlds). ``panel`` is the design's own world (for a
        launch, the launch as it would happen) and ``control`` the all-control
        world, on the same random numbers. The side effect is the launch's effect
        on the users it leaves out (NaN when there is none).
        """
        raise NotImplementedError

    def truth_control_mean(self, spec: DesignSpec, schedule: AssignmentSchedule,
                           control: OutcomePanel) -> float:
        """Return the all-control mean outcome of the estimand's users over its window.

        What a non-GTE estimand's relative truth divides by (its truth over this);
        only kinds whose ``estimand`` is not ``"gte"`` are asked. NaN by default.
        """
        return float("nan")

    def estimate(self, spec: DesignSpec, panel: OutcomePanel, schedule: AssignmentSchedule, *,
                 confidence: float, tick_hours: int) -> Estimate:
        """Return the design's estimate with its analytic interval (override when needed).

        By default, the named estimator called with the panel and schedule.
        """
        from spillgauge.estimators import __name__ as _package
        estimators = importlib.import_module(_package)

        function = getattr(estimators, self.estimator_name(spec))
        return function(panel, schedule, confidence=confidence)

    def analyse(self, spec: DesignSpec, panel: OutcomePanel, schedule: AssignmentSchedule, *,
                confidence: float, tick_hours: int, rng: np.random.Generator | None
                ) -> Estimate:
        """Analyse the design's world and return the :class:`Estimate`.

        The analytic estimate of :meth:`estimate`; when the spec asks for
        ``inference = "randomization"``, also Fisher's randomization p-value on
        ``Estimate.randomization_p_value`` from ``spec.permutations`` re-draws of
        the schedule's own assignment under the sharp null, analysed the same way,
        with the statistic ``spec.randomization_statistic``
        (:func:`~spillgauge.estimators.randomization_p_value`). ``rng`` feeds
        those re-draws (the replication's own randomization-test stream); None
        asks for the analytic estimate alone (a plan, which reads only intervals).
        """
        estimate = self.estimate(spec, panel, schedule, confidence=confidence,
                                 tick_hours=tick_hours)
        if rng is None or spec.params.get("inference", "analytic") != "randomization":
            return estimate
        check_rng(rng)

        def analytic(p: OutcomePanel, s: AssignmentSchedule) -> Estimate:
            return self.estimate(spec, p, s, confidence=confidence, tick_hours=tick_hours)

        p_value = randomization_p_value(analytic, panel, schedule, draws=spec.permutations,
                                        rng=rng, statistic=spec.randomization_statistic)
        return dataclasses.replace(estimate, randomization_p_value=p_value)


# Keys and words shared by the kinds that randomize clusters.


def cluster_source_key() -> DesignKey:
    """Return the declaration of ``clusters``: where the clusters come from."""
    return DesignKey(name="clusters", type=str, default="pools", choices=CLUSTER_SOURCES,
                     doc="`\"pools\"`, `\"graph\"` (communities of the social graph) or "
                         "`\"pools+graph\"` (communities kept whole, each joined to the pool most "
                         "of its members use)")


def resolution_key() -> DesignKey:
    """Return the declaration of ``resolution``: the community detection's resolution."""
    return DesignKey(name="resolution", type=float, default=1.0, minimum=0, maximum=100,
                     exclusive_minimum=True,
                     doc="resolution of the community detection for graph clusters (larger = "
                         "smaller clusters)")


def share_key(doc: str = "share of units treated") -> DesignKey:
    """Return the declaration of ``share``: the treated share."""
    return DesignKey(name="share", type=float, default=0.5, minimum=0, maximum=1,
                     exclusive_minimum=True, exclusive_maximum=True, doc=doc)


def randomization_key() -> DesignKey:
    """Return the declaration of ``randomization``: complete or Bernoulli."""
    return DesignKey(name="randomization", type=str, default="complete",
                     choices=RANDOMIZATIONS,
                     doc="`\"complete\"` (exactly round(share x units) treated) or "
                         "`\"bernoulli\"` (each unit on its own draw)")


def inference_keys() -> tuple[DesignKey, DesignKey, DesignKey]:
    """Return the declarations of ``inference``, ``permutations`` and
    ``randomization_statistic``, for every randomized kind."""
    return (DesignKey(name="inference", type=str, default="analytic", choices=INFERENCES,
                      doc="`\"analytic\"` (the estimator's interval and p-value) or "
                          "`\"randomization\"` (also Fisher's p-value from re-draws of the "
                          "design's own assignment; power then counts p <= alpha)"),
            DesignKey(name="permutations", type=int, default=500, minimum=19, maximum=100000,
                      doc="re-draws of the assignment for the randomization p-value "
                          "(read only when inference = \"randomization\")"),
            DesignKey(name="randomization_statistic", type=str, default="estimate",
                      choices=RANDOMIZATION_STATISTICS,
                      doc="what the randomization test compares across re-draws: "
                          "`\"estimate\"` or `\"studentized\"` (the estimate over its own "
                          "standard error; follows the analytic test where precision varies "
                          "by draw, e.g. burn-in)"))


def describe_clusters(source: str, *, plural: bool = False) -> str:
    """Return a cluster source in words, e.g. ``"graph community"``."""
    if plural:
        return {"pools": "stock pools", "graph": "graph communities",
                "pools+graph": "pools with their communities"}[source]
    return {"pools": "stock pool", "graph": "graph community",
            "pools+graph": "pool with its communities"}[source]


def cluster_label(prefix: str, spec: DesignSpec) -> str:
    """Return ``prefix-<source>[-r<resolution>]``, the start of a cluster design's label."""
    label = f"{prefix}-{spec.clusters.replace('+', '-')}"
    if spec.clusters != "pools" and spec.resolution != 1.0:
        label += f"-r{spec.resolution:g}"
    return label


def check_graph_clusters(spec: DesignSpec, scenario: Scenario, value: object) -> None:
    """Refuse graph clusters (or exposure) when the scenario has no graph."""
    check(scenario.graph.model != "none", f"{spec.at}.clusters",
          "'pools' when graph.model = 'none' (graph clusters need a graph)", value)


def clusters_per_arm(n_clusters: int, share: float, randomization: str) -> int:
    """Return the fewest clusters an arm can get, as ``draw_treated_units`` draws them.

    Complete randomization treats ``round(share * G)`` clusters (kept in ``[1, G - 1]``);
    Bernoulli can put every cluster in one arm, so its minimum is 0.

    >>> clusters_per_arm(4, 0.5, "complete"), clusters_per_arm(6, 0.2, "complete")
    (2, 1)
    """
    if randomization == "bernoulli" or n_clusters < 2:
        return 0
    n_treated = min(max(round(share * n_clusters), 1), n_clusters - 1)
    return min(n_treated, n_clusters - n_treated)


def check_clusters_per_arm(spec: DesignSpec, n_clusters: int, field: str, value: object) -> None:
    """Refuse a cluster design whose arms can never hold two clusters each.

    With fewer than :data:`MIN_CLUSTERS_PER_ARM` clusters in an arm the
    cluster-robust variance is undefined and no replication gives an interval.
    Complete randomization is judged by its fixed split; Bernoulli needs at least
    ``2 * MIN_CLUSTERS_PER_ARM`` clusters.
    """
    if spec.randomization == "bernoulli":
        needed = 2 * MIN_CLUSTERS_PER_ARM
        check(n_clusters >= needed, field,
              f">= {needed} clusters for a Bernoulli cluster design ({spec.at}: at least "
              f"{MIN_CLUSTERS_PER_ARM} per arm; this market has {n_clusters})", value)
        return
    fewest = clusters_per_arm(n_clusters, spec.share, spec.randomization)
    check(fewest >= MIN_CLUSTERS_PER_ARM, field,
          f"enough clusters for at least {MIN_CLUSTERS_PER_ARM} per arm ({spec.at}: share "
          f"{spec.share:g} of {n_clusters} clusters leaves {fewest} in an arm)", value)
