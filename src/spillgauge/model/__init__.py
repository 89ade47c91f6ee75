"""The market: population, pools, graph, calendar, and the engine that simulates worlds.

Nothing here knows of designs or estimators.
"""

from spillgauge.model.market import Market, build_market
from spillgauge.model.world import draw_candidates, simulate_worlds

__all__ = ["Market", "build_market", "draw_candidates", "simulate_worlds"]
