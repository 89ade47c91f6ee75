"""Serving from per-group counts, lost orders, tallies and unkept events, each against a slow loop
(STYLE.md section 5: a vectorized kernel agrees with the obvious loop)."""

from __future__ import annotations

import numpy as np
import pytest

from spillgauge.designs import draw_switchback_schedule, draw_user_schedule
from spillgauge.market.build import build_market
from spillgauge.schedule import AssignmentSchedule
from spillgauge.worlds.engine import draw_candidates
from spillgauge.worlds.serving import (
    group_starts,
    kept_mask,
    lost_orders,
    orders_per_group,
    tally_worlds,
)
from spillgauge.worlds.thinning import Unkept, live_events, unkept_events
from spillgauge.worlds.treatment import unit_dose
from tests.conftest import make_scenario


def _events(rng, n_segments=4, n_pools=5, size=300):
    """Random events sorted by (segment, pool); returns pools and segment starts."""
    segment = np.sort(rng.integers(0, n_segments, size))
    pool = rng.integers(0, n_pools, size)
    order = np.lexsort((pool, segment))
    segment_starts = np.searchsorted(segment[order], np.arange(n_segments + 1))
    return pool[order], segment_starts


@pytest.mark.parametrize("size", [300, 6, 0])
def test_group_starts_match_a_loop(rng, size):
    # against a loop; 6 events over 4 segments and 7 pools leave pools (and likely segments)
    # without events; size 0 has none
    pool, segment_starts = _events(rng, size=size)
    starts = group_starts(pool, segment_starts, 7)
    assert starts.shape == (segment_starts.size - 1, 8)
    assert (starts[:, -1] == segment_starts[1:]).all()
    for s in range(segment_starts.size - 1):
        for p in range(7):
            members = [i for i in range(segment_starts[s], segment_starts[s + 1])
                       if pool[i] == p]
            assert list(range(starts[s, p], starts[s, p + 1])) == members


@pytest.mark.parametrize("kept_share", [0.0, 0.3, 0.8, 1.0])
def test_serving_from_counts_matches_an_event_loop(rng, kept_share):
    pool, segment_starts = _events(rng)
    n_events = pool.size
    starts = group_starts(pool, segment_starts, 5)
    kept = rng.random(n_events) < kept_share
    unkept = np.flatnonzero(~kept)
    level = rng.integers(0, 12, size=5)  # the vectorized side's stock
    stock = level.copy()  # the loop's
    before, orders = orders_per_group(unkept, starts)
    served = np.empty_like(orders)
    slow_lost = []
    for s in range(segment_starts.size - 1):
        served[s] = np.minimum(orders[s], level)  # a pool's first min(orders, level) orders
        level -= served[s]
        for i in range(segment_starts[s], segment_starts[s + 1]):  # event by event, in order
            if kept[i]:
                if stock[pool[i]] > 0:
                    stock[pool[i]] -= 1
                else:
                    slow_lost.append(i)
        np.testing.assert_array_equal(level, stock)
        delivery = rng.integers(0, 4, size=5)  # a restock between segments
        level += delivery
        stock += delivery
    for s in range(segment_starts.size - 1):
        for p in range(5):
            assert orders[s, p] == kept[starts[s, p]:starts[s, p + 1]].sum()
            assert before[s, p] == kept[:starts[s, p]].sum()
    lost = lost_orders(unkept, kept_mask(n_events, unkept), starts, before, orders, served)
    assert lost.tolist() == slow_lost


def test_tallies_match_counting_each_world(rng):
    n_events, n_bins = 400, 17
    index = rng.integers(0, n_bins, n_events)
    other = rng.integers(0, 5, n_events)
    differ = np.sort(rng.choice(n_events, 120, replace=False))
    worlds, masks, lost = [], [], []
    for w in range(4):
        if w % 2:  # unkept given by their place in ``differ``
            in_differ = np.flatnonzero(rng.random(differ.size) < 0.5)
            unkept = Unkept(differ[in_differ], in_differ)
        else:
            unkept = Unkept(np.flatnonzero(rng.random(n_events) < 0.3), None)
        kept = kept_mask(n_events, unkept.events)
        gone = np.sort(rng.choice(np.flatnonzero(kept), 25, replace=False))
        worlds.append(unkept)
        masks.append(kept)
        lost.append(gone)
    tables = tally_worlds([(index, n_bins), (other, 5)], worlds, lost, differ)
    for (ix, bins), (placed, done) in zip([(index, n_bins), (other, 5)], tables):
        for w in range(4):
            fulfilled = masks[w].copy()
            fulfilled[lost[w]] = False
            for b in range(bins):
                assert placed[w, b] == np.sum(masks[w] & (ix == b))
                assert done[w, b] == np.sum(fulfilled & (ix == b))


@pytest.mark.parametrize("lift", [0.4, -0.3, 0.0])
def test_unkept_events_match_each_events_probability(lift):
    # Each world keeps an event when uniform < base_accept * (1 + lift * dose) (thinning,
    # Lewis & Shedler 1979); the shortcut through the two shared comparisons must drop
    # exactly the other live events, and the live events must hold every kept one.
    scenario = make_scenario(users={"count": 400}, pools={"count": 4},
                             calendar={"days": 3}, effect={"lift": lift})
    market = build_market(scenario, 3)
    candidates = draw_candidates(market, rng=np.random.default_rng(5))
    live = live_events(market, candidates, probabilities=True)
    n_ticks = scenario.calendar.n_ticks
    schedules = [
        AssignmentSchedule.fixed(n_users=market.n_users, n_ticks=n_ticks, is_treated=False),
        AssignmentSchedule.fixed(n_users=market.n_users, n_ticks=n_ticks, is_treated=True),
        draw_user_schedule(market.n_users, n_ticks, share=0.5, rng=np.random.default_rng(1)),
        draw_switchback_schedule(market.population.pool_of_user, n_ticks, block_ticks=7,
                                 rng=np.random.default_rng(2)),
    ]
    for schedule in schedules:
        dose = unit_dose(schedule, half_life_hours=0.0, tick_hours=1)
        own = dose[schedule.unit_of_user[candidates.user],
                   np.where(dose.shape[1] == 1, 0, candidates.tick)]
        kept = candidates.uniform < candidates.base_accept * (1.0 + lift * own)
        unkept = unkept_events(market, live, schedule)
        in_live = np.zeros(candidates.n_events, dtype=bool)
        in_live[np.flatnonzero(candidates.uniform < candidates.base_accept
                               * max(1.0, 1.0 + lift))] = True
        assert not (kept & ~in_live).any()
        live_kept = kept[in_live]
        assert unkept.events.tolist() == np.flatnonzero(~live_kept).tolist()
        if unkept.in_differ is not None:
            assert np.array_equal(live.differ[unkept.in_differ], unkept.events)


@pytest.mark.parametrize("seed", range(5))
def test_lost_orders_when_demand_meets_stock_exactly(seed):
    # Against an event-by-event loop (a pool serves its orders in arrival order while it has
    # stock; docs/model.md "Service"): stock at each segment's start is set per group to
    # exactly the group's orders, one less, one more or 0, so a group runs out on its last
    # order, one order before it, not at all, or at once. Pool 5 has no events, the world
    # drops the first and the last event, and one world keeps nothing, another everything.
    rng = np.random.default_rng([41, seed])
    pool, segment_starts = _events(rng, n_segments=5, n_pools=5, size=200)
    n_events, n_pools = pool.size, 6
    starts = group_starts(pool, segment_starts, n_pools)
    assert (starts[:, 5] == starts[:, 6]).all()  # pool 5's groups are empty
    for kept in (rng.random(n_events) < 0.6, np.zeros(n_events, bool), np.ones(n_events, bool)):
        if 0 < kept.sum() < n_events:
            kept[[0, -1]] = False
        unkept = np.flatnonzero(~kept)
        before, orders = orders_per_group(unkept, starts)
        shift = rng.choice([0, -1, 1, -10**6], size=orders.shape)
        level = np.maximum(orders + shift, 0)
        served = np.minimum(orders, level)
        slow_lost = []
        for s in range(segment_starts.size - 1):
            stock = level[s].copy()
            for i in range(segment_starts[s], segment_starts[s + 1]):
                if kept[i]:
                    if stock[pool[i]] > 0:
                        stock[pool[i]] -= 1
                    else:
                        slow_lost.append(i)
        lost = lost_orders(unkept, kept_mask(n_events, unkept), starts, before, orders, served)
        assert lost.tolist() == slow_lost
        assert lost.dtype == np.int64
        if kept.all():  # exactly as many orders as stock: none lost from such a group
            exact = (shift == 0) & (orders > 0)
            assert exact.any()
