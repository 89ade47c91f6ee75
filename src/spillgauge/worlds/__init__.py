"""The engine: simulate the worlds of one replication on common random numbers.

A world is the market run under one assignment schedule (all control, all
treated, or a design's); the engine takes schedules and knows nothing of designs.
"""

from spillgauge.worlds.engine import draw_candidates, simulate_worlds

__all__ = ["draw_candidates", "simulate_worlds"]
