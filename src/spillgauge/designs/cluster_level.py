"""Cluster-level designs: whole clusters (pools, graph communities) share one arm."""

from __future__ import annotations

import numpy as np
from scipy import sparse

from spillgauge.designs._draw import draw_treated_units
from spillgauge.designs.kind import (
    DesignKind,
    MarketView,
    check_clusters_per_arm,
    check_graph_clusters,
    cluster_label,
    cluster_source_key,
    describe_clusters,
    inference_keys,
    randomization_key,
    resolution_key,
    share_key,
)
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.keys import DesignKey
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["ClusterLevel", "draw_cluster_schedule"]


def draw_cluster_schedule(cluster_of_user: np.ndarray, n_ticks: int, *, share: float = 0.5,
                          randomization: str = "complete", rng: np.random.Generator,
                          exposure_units: sparse.csr_array | None = None,
                          unit_kind: str = "cluster") -> AssignmentSchedule:
    """Draw a cluster-level schedule: each cluster keeps one arm over the horizon.

    Parameters
    ----------
    cluster_of_user : ndarray of int, shape (n_users,)
        Cluster labels ``0..n_clusters-1``.
    n_ticks : int
    share : float
        Share of clusters treated.
    randomization : {"complete", "bernoulli"}
    rng : numpy.random.Generator
    exposure_units : csr_array, shape (n_users, n_clusters), optional
        Clusters touching each user's closed neighbourhood, for exposure-mapping
        estimators (graph cluster randomization; Ugander et al. 2013).
    unit_kind : {"cluster", "pool"}

    Examples
    --------
    >>> s = draw_cluster_schedule(np.array([0, 0, 1, 1, 2, 2]), 24,
    ...                           rng=np.random.default_rng(0))
    >>> s.n_units, s.user_is_treated().reshape(3, 2).all(axis=1).sum() in (1, 2)
    (3, True)
    """
    check_rng(rng)
    cluster_of_user = np.asarray(cluster_of_user, dtype=np.int64)
    n_clusters = int(cluster_of_user.max()) + 1 if cluster_of_user.size else 0
    treated = draw_treated_units(n_clusters, share=share, randomization=randomization, rng=rng)
    probability = share
    if randomization == "complete" and n_clusters:
        probability = float(treated.sum()) / n_clusters
    return AssignmentSchedule(unit_of_user=cluster_of_user, is_treated=treated[:, None],
                              period_start_ticks=np.zeros(1, dtype=np.int64), n_ticks=n_ticks,
                              treated_probability=probability, unit_kind=unit_kind,
                              randomization=randomization, exposure_units=exposure_units)


class ClusterLevel(DesignKind):
    """Whole clusters randomized: Hajek or Horvitz-Thompson, optionally by exposure."""

    name = "cluster"
    summary = "whole clusters (pools, graph communities) keep one arm over the horizon"
    keys = (
        share_key("share of clusters treated"),
        randomization_key(),
        cluster_source_key(),
        resolution_key(),
        DesignKey(name="estimator", type=str, default="hajek",
                  choices=("hajek", "horvitz_thompson"),
                  doc="`\"hajek\"` (ratio of cluster totals) or `\"horvitz_thompson\"`"),
        DesignKey(name="exposure", type=str, default="none", choices=("none", "neighbourhood"),
                  doc="`\"neighbourhood\"`: graph cluster randomization's exposure-mapping "
                      "estimator (users whose closed neighbourhood is wholly treated vs wholly "
                      "control; Ugander et al. 2013, Aronow & Samii 2017)"),
        *inference_keys(),
    )
    shown_keys = ("clusters",)

    def check(self, spec: DesignSpec, scenario: Scenario) -> None:
        if spec.clusters != "pools" or spec.exposure != "none":
            check_graph_clusters(spec, scenario,
                                 spec.clusters if spec.exposure == "none" else spec.exposure)
        if spec.clusters == "pools" and scenario.users.file is None \
                and scenario.pools.file is None:
            check_clusters_per_arm(spec, scenario.pools.count, "pools.count",
                                   scenario.pools.count)

    def default_label(self, spec: DesignSpec) -> str:
        label = cluster_label("cluster", spec)
        if spec.exposure == "neighbourhood":
            label += "-exposure"
        elif spec.estimator == "horvitz_thompson":
            label += "-ht"
        return label

    def describe_unit(self, spec: DesignSpec) -> str:
        return describe_clusters(spec.clusters)

    def estimator_name(self, spec: DesignSpec) -> str:
        family = "exposure" if spec.exposure == "neighbourhood" else "cluster"
        method = "horvitz_thompson" if spec.estimator == "horvitz_thompson" else "hajek"
        return f"{method}_{family}"

    def prepare(self, market: MarketView, spec: DesignSpec) -> None:
        labels = market.clusters(spec.clusters, resolution=spec.resolution)
        n_clusters = int(labels.max()) + 1 if labels.size else 0
        check_clusters_per_arm(spec, n_clusters, f"{spec.at}.clusters", spec.clusters)
        if spec.exposure == "neighbourhood":
            market.neighbourhood_clusters(spec.clusters, resolution=spec.resolution)

    def draw(self, market: MarketView, spec: DesignSpec, *, rng: np.random.Generator
             ) -> AssignmentSchedule:
        exposure = (market.neighbourhood_clusters(spec.clusters, resolution=spec.resolution)
                    if spec.exposure == "neighbourhood" else None)
        return draw_cluster_schedule(market.clusters(spec.clusters, resolution=spec.resolution),
                                     market.n_ticks, share=spec.share,
                                     randomization=spec.randomization, rng=rng,
                                     exposure_units=exposure,
                                     unit_kind="pool" if spec.clusters == "pools" else "cluster")
