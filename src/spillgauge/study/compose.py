"""Compose a design with a market: prepare it, draw its schedule, analyse its world.

The design registry says how; this module hands the kinds the market (as a
:class:`~spillgauge.designs.kind.MarketView`) and the world's outcome panel.
"""

from __future__ import annotations

import numpy as np

from spillgauge.designs.registry import kind_of
from spillgauge.estimators.estimate import Estimate
from spillgauge.market.build import Market
from spillgauge.panel import OutcomePanel
from spillgauge.scenario import DesignSpec
from spillgauge.schedule import AssignmentSchedule

__all__ = [
    "describe_unit",
    "draw_design_schedule",
    "estimate_design",
    "estimator_name",
    "prepare_market",
]


def prepare_market(market: Market, designs) -> None:
    """Build the clusters (and exposure incidences) the designs need, once, before any worker.

    Worker processes forked afterwards inherit them instead of each running
    community detection again; a design the market cannot serve (a test of
    interference on too few clusters) is refused here, before any replication runs.
    """
    for spec in designs:
        kind_of(spec).prepare(market, spec)


def draw_design_schedule(market: Market, spec: DesignSpec, *, rng: np.random.Generator
                         ) -> AssignmentSchedule:
    """Draw one schedule of a design in a market."""
    return kind_of(spec).draw(market, spec, rng=rng)


def estimator_name(spec: DesignSpec) -> str:
    """Return the full name of the estimator that analyses a design."""
    return kind_of(spec).estimator_name(spec)


def estimate_design(spec: DesignSpec, panel: OutcomePanel, schedule: AssignmentSchedule, *,
                    confidence: float, tick_hours: int, rng: np.random.Generator | None
                    ) -> Estimate:
    """Analyse one design's world with its estimator (``rng``: its randomization-test stream)."""
    return kind_of(spec).analyse(spec, panel, schedule, confidence=confidence,
                                 tick_hours=tick_hours, rng=rng)


def describe_unit(spec: DesignSpec) -> str:
    """Return the randomization unit in words, e.g. ``"pool"`` or ``"market block of 24 h"``."""
    return kind_of(spec).describe_unit(spec)
