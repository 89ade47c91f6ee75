"""Designs: one module per design kind, each drawing a schedule and naming its analysis.

:mod:`spillgauge.designs.registry` holds one line per kind; the scenario reader,
the study, the recommendation and the report look kinds up there.
"""

from spillgauge.designs.cluster_level import draw_cluster_schedule
from spillgauge.designs.interference import draw_interference_schedule
from spillgauge.designs.kind import DesignKind, MarketView
from spillgauge.designs.registry import (
    DESIGN_KINDS,
    KINDS,
    check_design,
    default_designs,
    design_kind,
    kind_of,
    make_design_spec,
)
from spillgauge.designs.rollout import draw_rollout_schedule
from spillgauge.designs.switchback import draw_switchback_schedule
from spillgauge.designs.user_level import draw_user_schedule

__all__ = ["draw_user_schedule", "draw_cluster_schedule", "draw_switchback_schedule",
           "draw_interference_schedule", "draw_rollout_schedule", "DesignKind", "MarketView",
           "KINDS", "DESIGN_KINDS", "design_kind", "kind_of", "make_design_spec",
           "check_design", "default_designs"]
