"""Designs: rules that draw an assignment schedule from arrays (never from the market)."""

from spillgauge.designs.cluster_level import draw_cluster_schedule
from spillgauge.designs.interference import draw_interference_schedule
from spillgauge.designs.rollout import draw_rollout_schedule
from spillgauge.designs.switchback import draw_switchback_schedule
from spillgauge.designs.user_level import draw_user_schedule

__all__ = ["draw_user_schedule", "draw_cluster_schedule", "draw_switchback_schedule",
           "draw_interference_schedule", "draw_rollout_schedule"]
