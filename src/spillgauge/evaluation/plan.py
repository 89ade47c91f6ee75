"""Compose a design from its scenario table: draw its schedule from the market, pick its estimator.

This is the one place where the market, the designs and the estimators meet:
designs get arrays (cluster labels, pool ids, neighbourhood incidence), and
estimators get only the world's outcome panel and the schedule.
"""

from __future__ import annotations

import numpy as np

from spillgauge import estimators
from spillgauge.designs import (
    draw_cluster_schedule,
    draw_interference_schedule,
    draw_rollout_schedule,
    draw_switchback_schedule,
    draw_user_schedule,
)
from spillgauge.errors import ScenarioError
from spillgauge.model.market import Market
from spillgauge.panel import OutcomePanel
from spillgauge.scenario import DesignSpec
from spillgauge.schedule import AssignmentSchedule

__all__ = ["draw_design_schedule", "estimate_design", "estimator_name", "describe_unit",
           "prepare_market"]


def _cluster_labels(market: Market, spec: DesignSpec) -> np.ndarray:
    return market.clusters(spec.clusters, resolution=spec.resolution)


def _interference_labels(market: Market, spec: DesignSpec) -> np.ndarray:
    """Return a test of interference's clusters, refusing a source with fewer than 4."""
    labels = _cluster_labels(market, spec)
    n_clusters = int(labels.max()) + 1
    if n_clusters < 4:
        raise ScenarioError(f"design[{spec.index}].clusters",
                            "a cluster source with at least 4 clusters for a test of "
                            f"interference (this market has {n_clusters})", spec.clusters)
    return labels


def prepare_market(market: Market, designs) -> None:
    """Build the clusters (and exposure incidences) the designs need, once, before any worker.

    Worker processes forked afterwards inherit them instead of each running
    community detection again; a test of interference on too few clusters is
    refused here, before any replication runs.
    """
    for spec in designs:
        if spec.kind == "interference_test":
            _interference_labels(market, spec)
        elif spec.kind == "cluster":
            _cluster_labels(market, spec)
            if spec.exposure == "neighbourhood":
                market.neighbourhood_clusters(spec.clusters, resolution=spec.resolution)


def draw_design_schedule(market: Market, spec: DesignSpec, *, rng: np.random.Generator
                         ) -> AssignmentSchedule:
    """Draw one schedule of a design in a market."""
    calendar = market.scenario.calendar
    n_ticks = calendar.n_ticks
    if spec.kind == "user":
        return draw_user_schedule(market.n_users, n_ticks, share=spec.share,
                                  randomization=spec.randomization, rng=rng)
    if spec.kind == "cluster":
        exposure = (market.neighbourhood_clusters(spec.clusters, resolution=spec.resolution)
                    if spec.exposure == "neighbourhood" else None)
        return draw_cluster_schedule(_cluster_labels(market, spec), n_ticks, share=spec.share,
                                     randomization=spec.randomization, rng=rng,
                                     exposure_units=exposure,
                                     unit_kind="pool" if spec.clusters == "pools" else "cluster")
    if spec.kind == "rollout":
        return draw_rollout_schedule(market.pool_of_user, n_ticks, waves=spec.waves, rng=rng)
    if spec.kind == "interference_test":
        return draw_interference_schedule(_interference_labels(market, spec), n_ticks, rng=rng)
    unit_of_user = (market.pool_of_user if spec.per == "pool"
                    else np.zeros(market.n_users, dtype=np.int64))
    return draw_switchback_schedule(unit_of_user, n_ticks,
                                    block_ticks=spec.block_hours // calendar.tick_hours,
                                    share=spec.share, rng=rng)


def estimator_name(spec: DesignSpec) -> str:
    """Return the full name of the estimator that analyses a design."""
    if spec.kind == "user":
        return "regression_adjusted_difference" if spec.adjust else "difference_in_means"
    if spec.kind == "cluster":
        if spec.exposure == "neighbourhood":
            return "horvitz_thompson_exposure" if spec.estimator == "horvitz_thompson" \
                else "hajek_exposure"
        return "horvitz_thompson_cluster" if spec.estimator == "horvitz_thompson" \
            else "hajek_cluster"
    if spec.kind == "interference_test":
        return "interference_test"
    if spec.kind == "rollout":
        return "difference_in_differences"
    return "switchback_difference"


def estimate_design(spec: DesignSpec, panel: OutcomePanel, schedule: AssignmentSchedule, *,
                    confidence: float, tick_hours: int):
    """Analyse one design's world with its estimator.

    Returns an :class:`Estimate`, or for a test of interference an
    :class:`~spillgauge.estimators.InterferenceTest`.
    """
    function = getattr(estimators, estimator_name(spec))
    if spec.kind == "switchback":
        return function(panel, schedule, confidence=confidence,
                        burn_in_ticks=spec.burn_in_hours // tick_hours)
    return function(panel, schedule, confidence=confidence)


def describe_unit(spec: DesignSpec) -> str:
    """Return the randomization unit in words, e.g. ``"pool"`` or ``"market block of 24 h"``."""
    if spec.kind == "user":
        return "user"
    if spec.kind == "cluster":
        return {"pools": "stock pool", "graph": "graph community",
                "pools+graph": "pool with its communities"}[spec.clusters]
    if spec.kind == "rollout":
        return f"pool, staggered rollout in {spec.waves} waves"
    if spec.kind == "interference_test":
        half = {"pools": "stock pools", "graph": "graph communities",
                "pools+graph": "pools with their communities"}[spec.clusters]
        return f"test of interference: half the {half} by user, half whole"
    where = "pool" if spec.per == "pool" else "market"
    burn = f", {spec.burn_in_hours} h burn-in after a switch" if spec.burn_in_hours else ""
    return f"{where} time block of {spec.block_hours} h{burn}"
