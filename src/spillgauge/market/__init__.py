"""The market: users, stock pools, the social graph and its communities, the calendar.

Built once per scenario and study seed (:func:`build_market`). Nothing here knows
of worlds, designs or estimators.
"""

from spillgauge.market.build import Market, build_market

__all__ = ["Market", "build_market"]
