"""The engine against the slow reference loop on edge cases the main cases do not reach.

``tests/worlds/test_reference_engine.py`` holds the reference: the model of docs/model.md
in plain loops, event by event (thinning: Lewis & Shedler 1979; service in arrival order,
restocks and deliveries at their hours). Here the vectorized engine must give the same
numbers exactly (STYLE.md section 5: the vectorized path equals the loop path) on small
random markets over several seeds where the fast paths take their rarer branches:
negative and zero lifts (the other shared comparison in ``worlds.thinning``), negative
peer lifts, a pool with no stock, pools with no users, a delivery or a review on the
horizon's last tick, one pool with substitution on, day-long ticks, and the per-user
totals of ``user_days=False`` (the tallies of ``worlds.serving.tally_worlds``).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from spillgauge.market.build import build_market
from spillgauge.market.calendar import stock_event_hours
from spillgauge.worlds.engine import draw_candidates, simulate_worlds
from tests.worlds.test_reference_engine import (
    FIELDS,
    _reference_pool_shocks,
    _reference_shocks,
    _tight,
    basic_schedules,
    reference_world,
)

_GRAPH = {"model": "pool_blocks", "mean_degree": 4, "within_pool_share": 0.6}

EDGE_CASES = {
    "negative_lift": _tight(effect={"lift": -0.45}, pools={"lead_time_hours": 5}),
    "zero_lift": _tight(effect={"lift": 0.0}, pools={"stock_cover": 0.7}),
    "zero_lift_with_peers": _tight(users={"count": 70}, graph=_GRAPH,
                                   effect={"lift": 0.0, "peer_lift": 0.8}),
    "negative_peer_lift_carryover": _tight(users={"count": 70}, graph=_GRAPH,
                                           effect={"lift": 0.6, "peer_lift": -0.5,
                                                   "carryover_half_life_hours": 2}),
    "both_lifts_negative": _tight(users={"count": 70}, graph=_GRAPH,
                                  pools={"stock_cover": 0.6},
                                  effect={"lift": -0.3, "peer_lift": -0.6}),
    "negative_lift_carryover": _tight(effect={"lift": -0.5, "carryover_half_life_hours": 3},
                                      pools={"stock_cover": 0.6}),
    # deliveries at hours 23 and 47: the second on the last tick of a 2-day horizon
    "delivery_on_last_tick": _tight(calendar={"days": 2},
                                    pools={"restock_every_hours": 24, "lead_time_hours": 23}),
    # reviews at hours 0 and 47 with no lead time: a restock on the last tick
    "review_on_last_tick": _tight(calendar={"days": 2},
                                  pools={"restock_every_hours": 47, "stock_cover": 0.5}),
    # 40 users over 25 pools: several pools have no users and no stock
    "pools_without_users": _tight(users={"count": 40}, pools={"count": 25, "stock_cover": 0.6}),
    "one_pool_substitute": _tight(pools={"count": 1, "on_stockout": "substitute",
                                         "substitute_share": 0.8, "lead_time_hours": 3}),
    "negative_lift_substitute": _tight(effect={"lift": -0.3},
                                       pools={"count": 3, "stock_cover": 0.55,
                                              "on_stockout": "substitute",
                                              "substitute_share": 1.0}),
    "day_ticks": _tight(calendar={"days": 6, "tick_hours": 24},
                        pools={"restock_every_hours": 48, "lead_time_hours": 24}),
}


def _schedules(market, seed):
    """The reference's basic schedules, with blocks scaled to the horizon (day ticks)."""
    n_ticks = market.scenario.calendar.n_ticks
    return basic_schedules(market, np.random.default_rng(seed),
                           market_block_ticks=max(1, n_ticks // 9),
                           pool_block_ticks=max(1, n_ticks // 13))


def _check_against_reference(market, seed):
    """Engine == reference on every world and field; return the reference's totals."""
    scenario = market.scenario
    schedules = _schedules(market, seed=seed[1] + 100)
    panels = simulate_worlds(market, schedules, rng=np.random.default_rng(seed))
    lean = simulate_worlds(market, schedules, rng=np.random.default_rng(seed), user_days=False)
    events = draw_candidates(market, rng=np.random.default_rng(seed))
    shocks = _reference_shocks(scenario.calendar, seed)
    pool_shocks = _reference_pool_shocks(scenario.pools, market.n_pools, scenario.calendar.days,
                                         seed)
    totals = {"lost": 0, "substituted": 0, "demanded": [], "fulfilled": 0}
    for schedule, panel, thin in zip(schedules, panels, lean):
        expected, substitutes, _ = reference_world(market, schedule, events, shocks, pool_shocks)
        for field in FIELDS:
            np.testing.assert_array_equal(getattr(panel, field), expected[field], err_msg=field)
        # the per-user totals come from the tallies less unkept and lost events
        np.testing.assert_array_equal(thin.fulfilled_total, expected["fulfilled"].sum(axis=1))
        np.testing.assert_array_equal(thin.demanded_total, expected["demanded"].sum(axis=1))
        for field in FIELDS[2:]:
            np.testing.assert_array_equal(getattr(thin, field), expected[field], err_msg=field)
        totals["lost"] += int(expected["pool_lost"].sum())
        totals["substituted"] += substitutes
        totals["demanded"].append(int(expected["demanded"].sum()))
        totals["fulfilled"] += int(expected["fulfilled"].sum())
    return totals


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("name", list(EDGE_CASES))
def test_engine_equals_the_reference_loop_on_edge_cases(name, seed):
    scenario = EDGE_CASES[name]
    market = build_market(scenario, 11 + seed)
    totals = _check_against_reference(market, [23, seed])
    # Each case exercises what it is named for.
    assert totals["lost"] > 0
    lift = scenario.effect.lift
    control, treated = totals["demanded"][:2]
    if lift == 0 and scenario.graph.model == "none":
        assert control == treated and len(set(totals["demanded"])) == 1
    elif lift < 0 and scenario.graph.model == "none":
        assert treated < control
    if name == "pools_without_users":
        assert np.bincount(market.pool_of_user, minlength=market.n_pools).min() == 0
    if name == "one_pool_substitute":
        assert totals["substituted"] == 0  # nothing to substitute to
    if name == "negative_lift_substitute":
        assert totals["substituted"] > 0
    last_hour = scenario.calendar.horizon_hours - scenario.calendar.tick_hours
    reviews, deliveries = stock_event_hours(scenario.pools, scenario.calendar.horizon_hours)
    if name == "delivery_on_last_tick":
        assert deliveries[-1] == last_hour
    if name == "review_on_last_tick":
        assert reviews[-1] == last_hour


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_a_pool_without_stock_loses_every_order(seed):
    # Pool 0's order-up-to level set to 0 and pool 1's to 1: every order of pool 0 is lost,
    # pool 1 sells at most one unit per cycle; the rest must still equal the reference loop.
    market = build_market(_tight(pools={"lead_time_hours": 6}), 7 + seed)
    levels = market.population.order_up_to.copy()
    levels[0], levels[1] = 0, 1
    population = dataclasses.replace(market.population, order_up_to=levels)
    market = dataclasses.replace(market, population=population, _clusters={})
    _check_against_reference(market, [29, seed])
    panel = simulate_worlds(market, _schedules(market, seed)[:2],
                            rng=np.random.default_rng([29, seed]))[1]
    assert panel.pool_demanded[0].sum() > 0 and panel.pool_fulfilled[0].sum() == 0
    assert (panel.pool_stock[0] == 0).all()
    assert panel.pool_fulfilled[1].sum() <= market.scenario.calendar.days
