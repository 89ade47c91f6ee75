"""A test of interference: half the clusters run a user-level experiment, half a cluster-level one."""

from __future__ import annotations

import numpy as np

from spillgauge.designs._draw import draw_treated_units
from spillgauge.designs.kind import (
    DesignKind,
    MarketView,
    check_graph_clusters,
    cluster_label,
    cluster_source_key,
    describe_clusters,
    resolution_key,
)
from spillgauge.errors import ScenarioError
from spillgauge.estimators.estimate import Estimate, InterferenceDiagnostic
from spillgauge.panel import OutcomePanel
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.keys import check
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["MIN_CLUSTERS", "InterferenceTestDesign", "draw_interference_schedule"]

MIN_CLUSTERS = 4  # two per half


def draw_interference_schedule(cluster_of_user: np.ndarray, n_ticks: int, *,
                               share: float = 0.5, rng: np.random.Generator
                               ) -> AssignmentSchedule:
    """Draw the schedule of a test for interference (Saveski et al. 2017).

    The clusters are completely randomized into two halves. In the *user arm*
    every user is randomized on their own (complete randomization, ``share``
    treated); in the *cluster arm* whole clusters are (complete randomization of
    clusters). Without interference both halves estimate the same effect.

    Parameters
    ----------
    cluster_of_user : ndarray of int, shape (n_users,)
        Cluster labels ``0..n_clusters-1``; at least 4 clusters.
    n_ticks : int
    share : float
        Share treated within each half.
    rng : numpy.random.Generator

    Returns
    -------
    AssignmentSchedule
        Units are users; ``cluster_of_user`` and ``is_cluster_arm`` say which
        half each user's cluster is in.

    Examples
    --------
    >>> s = draw_interference_schedule(np.repeat(np.arange(4), 3), 24,
    ...                                rng=np.random.default_rng(0))
    >>> int(s.is_cluster_arm.sum()), s.n_units
    (2, 12)
    """
    check_rng(rng)
    cluster_of_user = np.asarray(cluster_of_user, dtype=np.int64)
    n_clusters = int(cluster_of_user.max()) + 1 if cluster_of_user.size else 0
    if n_clusters < MIN_CLUSTERS:
        raise ValueError(f"a test of interference needs at least {MIN_CLUSTERS} clusters; "
                         f"got {n_clusters}")
    is_cluster_arm = draw_treated_units(n_clusters, share=0.5, randomization="complete", rng=rng)
    treated = np.zeros(cluster_of_user.size, dtype=bool)
    in_user_arm = np.flatnonzero(~is_cluster_arm[cluster_of_user])
    treated[in_user_arm] = draw_treated_units(in_user_arm.size, share=share,
                                              randomization="complete", rng=rng)
    arm_clusters = np.flatnonzero(is_cluster_arm)
    cluster_treated = np.zeros(n_clusters, dtype=bool)
    cluster_treated[arm_clusters] = draw_treated_units(arm_clusters.size, share=share,
                                                       randomization="complete", rng=rng)
    in_cluster_arm = is_cluster_arm[cluster_of_user]
    treated[in_cluster_arm] = cluster_treated[cluster_of_user[in_cluster_arm]]
    return AssignmentSchedule(unit_of_user=np.arange(cluster_of_user.size),
                              is_treated=treated[:, None],
                              period_start_ticks=np.zeros(1, dtype=np.int64), n_ticks=n_ticks,
                              treated_probability=share, unit_kind="user",
                              randomization="complete", cluster_of_user=cluster_of_user,
                              is_cluster_arm=is_cluster_arm)


class InterferenceTestDesign(DesignKind):
    """Half the clusters randomized by user, half whole; the two estimates compared."""

    name = "interference_test"
    summary = ("half the clusters run a user-level experiment, the other half a cluster-level "
               "one, and the two estimates are compared (Saveski et al. 2017)")
    keys = (cluster_source_key(), resolution_key())
    shown_keys = ("clusters",)
    is_recommendable = False

    def check(self, spec: DesignSpec, scenario: Scenario) -> None:
        if spec.clusters == "pools":
            check(scenario.has_pools(MIN_CLUSTERS), "pools.count",
                  f">= {MIN_CLUSTERS} for a test of interference on pools ({spec.at})",
                  scenario.pools.count)
        else:
            check_graph_clusters(spec, scenario, spec.clusters)

    def default_label(self, spec: DesignSpec) -> str:
        return cluster_label("interference-test", spec)

    def describe_unit(self, spec: DesignSpec) -> str:
        half = describe_clusters(spec.clusters, plural=True)
        return f"test of interference: half the {half} by user, half whole"

    def estimator_name(self, spec: DesignSpec) -> str:
        return "interference_test"

    def _labels(self, market: MarketView, spec: DesignSpec) -> np.ndarray:
        labels = market.clusters(spec.clusters, resolution=spec.resolution)
        n_clusters = int(labels.max()) + 1
        if n_clusters < MIN_CLUSTERS:
            raise ScenarioError(f"{spec.at}.clusters",
                                f"a cluster source with at least {MIN_CLUSTERS} clusters for a "
                                f"test of interference (this market has {n_clusters})",
                                spec.clusters)
        return labels

    def prepare(self, market: MarketView, spec: DesignSpec) -> None:
        self._labels(market, spec)

    def draw(self, market: MarketView, spec: DesignSpec, *, rng: np.random.Generator
             ) -> AssignmentSchedule:
        return draw_interference_schedule(self._labels(market, spec), market.n_ticks, rng=rng)

    def estimate(self, spec: DesignSpec, panel: OutcomePanel, schedule: AssignmentSchedule, *,
                 confidence: float, tick_hours: int) -> Estimate:
        from spillgauge.estimators.interference import interference_test

        test = interference_test(panel, schedule, confidence=confidence)
        arm = test.cluster_arm  # its estimate of the GTE is the cluster half's
        return Estimate(arm.point, arm.standard_error, arm.ci_low, arm.ci_high,
                        self.estimator_name(spec), arm.n_units, diagnostic=InterferenceDiagnostic(
                            user_arm_point=test.user_arm.point,
                            cluster_arm_point=test.cluster_arm.point, delta=test.delta,
                            delta_se=test.delta_se, statistic=test.statistic,
                            p_value=test.p_value, rejects=bool(test.rejects),
                            rejects_chebyshev=bool(test.rejects_chebyshev)),
                        confidence=arm.confidence, degrees_of_freedom=arm.degrees_of_freedom,
                        control_mean=arm.control_mean, control_mean_se=arm.control_mean_se,
                        control_covariance=arm.control_covariance)
