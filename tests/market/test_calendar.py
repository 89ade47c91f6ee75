"""The stock calendar: one simpy process gives the review and delivery times the engine uses."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from spillgauge.market.build import build_market
from spillgauge.market.calendar import segment_bounds, stock_event_hours
from spillgauge.scenario import Calendar, Pools
from spillgauge.schedule import AssignmentSchedule
from spillgauge.worlds.engine import draw_candidates, simulate_worlds
from tests.conftest import make_scenario


@pytest.mark.parametrize(("every", "lead", "horizon"),
                         [(24, 0, 72), (24, 6, 72), (12, 11, 48), (5, 3, 23), (1, 0, 4),
                          (30, 29, 30)])
def test_stock_event_hours_follow_the_periodic_review_rule(every, lead, horizon):
    # Periodic review (docs/model.md, "Stock pools"): reviews at hours 0, R, 2R, ... and each
    # delivery L hours after its review, both kept only before the horizon (common practice,
    # no source: periodic review with a lead time shorter than the review period).
    reviews, deliveries = stock_event_hours(Pools(restock_every_hours=every,
                                                  lead_time_hours=lead), horizon)
    expected_reviews = [k * every for k in range(horizon) if k * every < horizon]
    expected_deliveries = [r + lead for r in expected_reviews if r + lead < horizon]
    assert reviews.tolist() == expected_reviews
    assert deliveries.tolist() == expected_deliveries


def test_segment_bounds_are_the_ticks_of_the_stock_events():
    pools = Pools(restock_every_hours=12, lead_time_hours=4)
    calendar = Calendar(days=2, tick_hours=2)
    # Reviews at hours 0, 12, 24, 36 and deliveries at 4, 16, 28, 40, in 2-hour ticks, then
    # the horizon's 24 ticks (worked by hand from the rule above).
    assert segment_bounds(pools, calendar, every_tick=False).tolist() == \
        [0, 2, 6, 8, 12, 14, 18, 20, 24]
    assert segment_bounds(pools, calendar, every_tick=True).tolist() == list(range(25))


@pytest.mark.parametrize("wrong_bounds", [[0, 48], [0, 12, 48]])
def test_engine_refuses_bounds_that_miss_a_stock_event(wrong_bounds):
    # The engine moves stock with the same calendar the bounds come from. Events grouped by
    # other bounds (missing the delivery at hour 6: never run, or run at hour 12) would serve
    # orders from the wrong level, so the engine stops.
    scenario = make_scenario(users={"count": 50}, pools={"count": 2, "lead_time_hours": 6},
                             calendar={"days": 2})
    market = build_market(scenario, 0)
    events = draw_candidates(market, rng=np.random.default_rng(0))
    n_ticks = scenario.calendar.n_ticks
    schedule = AssignmentSchedule.fixed(n_users=market.n_users, n_ticks=n_ticks,
                                        is_treated=False)
    simulate_worlds(market, [schedule], rng=np.random.default_rng(0), events=events)
    starts = np.linspace(0, events.n_events, len(wrong_bounds)).astype(np.int64)
    wrong = dataclasses.replace(events, segment_bounds=np.array(wrong_bounds),
                                segment_starts=starts)
    with pytest.raises(RuntimeError, match="hour 6 is not on a segment bound"):
        simulate_worlds(market, [schedule], rng=np.random.default_rng(0), events=wrong)
