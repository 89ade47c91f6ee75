"""The engine against a slow reference: the model of docs/model.md in plain loops, event by event.

The reference takes the engine's candidate draw (``draw_candidates``: arrival times, thinning
uniforms, substitute pools and uniforms) and the replication's daily-shock normals, and does
everything else itself in plain Python: shocks, doses with carryover, peer exposure, thinning,
restocks and deliveries at their hours, service in arrival order, stock-outs lost or
substituted. On the same draws the vectorized engine must give the same numbers exactly
(STYLE.md section 5: the vectorized path equals the loop path).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from spillgauge.designs import (
    draw_cluster_schedule,
    draw_switchback_schedule,
    draw_user_schedule,
)
from spillgauge.market.build import build_market
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import POOL_SHOCKS, side_stream
from spillgauge.worlds.engine import draw_candidates, simulate_worlds
from tests.conftest import make_scenario

FIELDS = ("fulfilled", "demanded", "pool_fulfilled", "pool_demanded", "pool_lost", "pool_stock")


def _reference_shocks(calendar, seed):
    """docs/model.md "Calendar": x_0 = s e_0, x_d = rho x_(d-1) + s sqrt(1 - rho^2) e_d,
    m_d = exp(x_d - s^2 / 2). The normals e_d are the first draws of the demand stream."""
    s, rho = calendar.daily_shock_sd, calendar.daily_shock_autocorrelation
    if s == 0:
        return [1.0] * calendar.days
    e = np.random.default_rng(seed).standard_normal(calendar.days).tolist()
    x = [s * e[0]]
    for d in range(1, calendar.days):
        x.append(rho * x[-1] + s * math.sqrt(1 - rho * rho) * e[d])
    return [math.exp(v - s * s / 2) for v in x]


def _reference_pool_shocks(pools, n_pools, days, seed):
    """docs/model.md "Pool shocks": own AR(1) x_kd as above with (shock_sd, shock_autocorrelation),
    factors f_jd = factor_sd (e_j0 + ... + e_jd), loadings l_kj, and
    m_kd = exp(x_kd - s^2/2 + sum_j l_kj f_jd - (d + 1) factor_sd^2 sum_j l_kj^2 / 2).
    The normals come from the demand stream's pool-shock side stream, in the documented order."""
    s, rho, q, n_f = pools.shock_sd, pools.shock_autocorrelation, pools.factor_sd, pools.factor_count
    if s == 0 and q == 0:
        return [[1.0] * days for _ in range(n_pools)]
    rng = side_stream(np.random.default_rng(seed), POOL_SHOCKS)
    own = [[0.0] * days for _ in range(n_pools)]
    if s > 0:
        e = rng.standard_normal((n_pools, days)).tolist()
        for k in range(n_pools):
            x = s * e[k][0]
            own[k][0] = x - s * s / 2
            for d in range(1, days):
                x = rho * x + s * math.sqrt(1 - rho * rho) * e[k][d]
                own[k][d] = x - s * s / 2
    if q > 0:
        load = rng.standard_normal((n_pools, n_f)).tolist()
        steps = rng.standard_normal((n_f, days)).tolist()
        for k in range(n_pools):
            for d in range(days):
                value = 0.0
                for j in range(n_f):
                    value += load[k][j] * q * sum(steps[j][: d + 1])
                value -= (d + 1) * q * q * sum(v * v for v in load[k]) / 2
                own[k][d] += value
    return [[math.exp(v) for v in row] for row in own]


def reference_world(market, schedule, events, shocks, pool_shocks=None):
    """Simulate one world tick by tick and order by order; return the panel's arrays."""
    sc = market.scenario
    cal, pools, effect = sc.calendar, sc.pools, sc.effect
    n_users, n_pools, th = market.n_users, market.n_pools, cal.tick_hours
    n_ticks, days = cal.n_ticks, cal.days
    home = market.pool_of_user.tolist()
    adj = market.adjacency
    friends = [adj.indices[adj.indptr[i]:adj.indptr[i + 1]].tolist() for i in range(n_users)]
    # Dose d_u(t): 1 when treated, 2^(-(t - last) * tick_hours / h) after, 0 before.
    starts, h = schedule.period_start_ticks.tolist(), effect.carryover_half_life_hours
    dose = []
    for u in range(schedule.n_units):
        row, last = [], None
        for t in range(n_ticks):
            period = max(p for p in range(len(starts)) if starts[p] <= t)
            if schedule.is_treated[u, period]:
                row.append(1.0)
                last = t
            else:
                row.append(2.0 ** (-(t - last) * th / h) if last is not None and h > 0 else 0.0)
        dose.append(row)
    unit = schedule.unit_of_user.tolist()
    # Thinning bound (docs/model.md "Common random numbers", step 1).
    peer = max(1.0, 1.0 + effect.peer_lift) if adj.nnz else 1.0
    if pool_shocks is None:
        pool_shocks = [[1.0] * days for _ in range(n_pools)]
    g = cal.trend_per_week  # (1 + g) ** (hour / 168), largest at the horizon when g > 0
    peak = ((1 + cal.diurnal_amplitude) * max(1.0, 1.0 + effect.lift) * peer * max(shocks)
            * max(max(row) for row in pool_shocks) * max(1.0, (1 + g) ** (days * 24 / 168)))
    by_tick = [[] for _ in range(n_ticks)]
    for e in sorted(range(events.n_events), key=lambda e: events.hour[e]):  # arrival order
        by_tick[min(int(events.hour[e] // th), n_ticks - 1)].append(e)
    out = {"fulfilled": np.zeros((n_users, days), int), "demanded": np.zeros((n_users, days), int)}
    for name in FIELDS[2:]:
        out[name] = np.zeros((n_pools, n_ticks), int)
    level = market.population.order_up_to.tolist()
    due_hour, due = None, None
    substitutes = 0
    can_substitute = pools.on_stockout == "substitute" and n_pools > 1
    for t in range(n_ticks):
        now = t * th
        if now == due_hour:  # delivery of the last review's order
            level = [a + b for a, b in zip(level, due)]
        if now % pools.restock_every_hours == 0:  # review: order up to S
            order = [max(s - a, 0) for s, a in zip(market.population.order_up_to, level)]
            if pools.lead_time_hours == 0:
                level = [a + b for a, b in zip(level, order)]
            else:
                due_hour, due = now + pools.lead_time_hours, order
        tries = []
        for e in by_tick[t]:
            i, hour = int(events.user[e]), float(events.hour[e])
            k, day = home[i], min(int(hour // 24), days - 1)
            diurnal = 1 + cal.diurnal_amplitude * math.sin(2 * math.pi * ((hour % 24) - 6) / 24)
            exposure = (sum(dose[unit[j]][t] for j in friends[i]) / len(friends[i])
                        if friends[i] else 0.0)
            trend = (1 + g) ** (hour / 168)
            accept = (diurnal * shocks[day] * pool_shocks[k][day] * trend / peak
                      * (1 + effect.lift * dose[unit[i]][t])
                      * (1 + effect.peer_lift * exposure))
            if not events.uniform[e] < accept:
                continue
            out["demanded"][i, day] += 1
            out["pool_demanded"][k, t] += 1
            if level[k] > 0:
                level[k] -= 1
                out["fulfilled"][i, day] += 1
                out["pool_fulfilled"][k, t] += 1
            elif can_substitute and events.substitute_uniform[e] < pools.substitute_share:
                tries.append(e)
        for e in tries:  # after every pool served its own orders of the tick
            i, other = int(events.user[e]), int(events.substitute_pool[e])
            assert other != home[i]
            if level[other] > 0:
                level[other] -= 1
                substitutes += 1
                day = min(int(events.hour[e] // 24), days - 1)
                out["fulfilled"][i, day] += 1
                out["pool_fulfilled"][home[i], t] += 1
        out["pool_stock"][:, t] = level
    out["pool_lost"] = out["pool_demanded"] - out["pool_fulfilled"]
    return out, substitutes, dose


def _tight(**over):
    """A small market with binding stock: 60 users, 4 pools, 4 days, 2 orders a day each."""
    sections = {"users": {"count": 60, "orders_per_week": 14.0},
                "pools": {"count": 4, "stock_cover": 0.85}, "calendar": {"days": 4},
                "effect": {"lift": 0.4}}
    for key, value in over.items():
        sections[key] = value if key == "design" else {**sections.get(key, {}), **value}
    return make_scenario(**sections)


CASES = {
    "lead_time": _tight(pools={"lead_time_hours": 7, "restock_every_hours": 24}),
    "diurnal_shocks_2h_ticks": _tight(calendar={"days": 5, "tick_hours": 2,
                                                "diurnal_amplitude": 0.7, "daily_shock_sd": 0.5,
                                                "daily_shock_autocorrelation": 0.4},
                                      pools={"restock_every_hours": 12, "lead_time_hours": 4}),
    "carryover_switchback": _tight(effect={"lift": 0.8, "carryover_half_life_hours": 3},
                                   calendar={"diurnal_amplitude": 0.3}),
    "peer_graph": _tight(users={"count": 80}, graph={"model": "pool_blocks", "mean_degree": 4,
                                                     "within_pool_share": 0.6},
                         effect={"lift": 0.2, "peer_lift": 0.9, "carryover_half_life_hours": 5}),
    "clusters": _tight(users={"count": 70}, pools={"count": 5},
                       graph={"model": "communities", "community_count": 6, "mean_degree": 3},
                       effect={"peer_lift": 0.5}),
    "substitute": _tight(pools={"count": 5, "stock_cover": 0.7, "demand_spread": 0.9,
                                "on_stockout": "substitute", "substitute_share": 0.7,
                                "lead_time_hours": 3}),
    "substitute_everything": _tight(
        users={"count": 50}, calendar={"days": 3, "tick_hours": 3, "diurnal_amplitude": 0.5,
                                       "daily_shock_sd": 0.3},
        pools={"count": 3, "stock_cover": 0.6, "on_stockout": "substitute",
               "substitute_share": 1.0, "restock_every_hours": 12, "lead_time_hours": 6},
        graph={"model": "small_world", "mean_degree": 4, "rewire_share": 0.3},
        effect={"lift": 0.5, "peer_lift": 0.4, "carryover_half_life_hours": 4},
        # 3 pools cannot hold two per arm, so the default cluster design is refused
        design=[{"kind": "user"}, {"kind": "switchback", "block_hours": 24}]),
    "pool_shocks_factors_trend": _tight(
        calendar={"days": 6, "daily_shock_sd": 0.2, "trend_per_week": 0.3},
        pools={"count": 5, "shock_sd": 0.4, "shock_autocorrelation": 0.6, "factor_count": 2,
               "factor_sd": 0.15, "lead_time_hours": 5}),
    "falling_trend_factors_only": _tight(
        calendar={"days": 5, "tick_hours": 4, "trend_per_week": -0.4},
        pools={"count": 4, "factor_count": 3, "factor_sd": 0.2, "on_stockout": "substitute",
               "substitute_share": 0.5}),
}


def basic_schedules(market, rng, *, market_block_ticks=5, pool_block_ticks=3):
    """All control, all treated, users, a market-wide switchback and a per-pool one."""
    n, n_ticks = market.n_users, market.scenario.calendar.n_ticks
    schedules = [AssignmentSchedule.fixed(n_users=n, n_ticks=n_ticks, is_treated=b)
                 for b in (False, True)]
    schedules.append(draw_user_schedule(n, n_ticks, rng=rng))
    schedules.append(draw_switchback_schedule(np.zeros(n, dtype=np.int64), n_ticks,
                                              block_ticks=market_block_ticks, rng=rng))
    schedules.append(draw_switchback_schedule(market.pool_of_user, n_ticks,
                                              block_ticks=pool_block_ticks, rng=rng))
    return schedules


def _schedules(market, seed):
    n_ticks = market.scenario.calendar.n_ticks
    rng = np.random.default_rng(seed)
    schedules = basic_schedules(market, rng)
    schedules.append(draw_cluster_schedule(market.pool_of_user, n_ticks, unit_kind="pool",
                                           rng=rng))
    if market.adjacency.nnz:
        schedules.append(draw_cluster_schedule(market.clusters("graph"), n_ticks,
                                               randomization="bernoulli", rng=rng))
    return schedules


@pytest.mark.parametrize("name", list(CASES))
def test_engine_equals_the_reference_loop(name):
    scenario = CASES[name]
    market = build_market(scenario, 5)
    seed = [17, len(name)]
    schedules = _schedules(market, seed=3)
    panels = simulate_worlds(market, schedules, rng=np.random.default_rng(seed))
    events = draw_candidates(market, rng=np.random.default_rng(seed))
    shocks = _reference_shocks(scenario.calendar, seed)
    pool_shocks = _reference_pool_shocks(scenario.pools, market.n_pools, scenario.calendar.days,
                                         seed)
    lost = substituted = 0
    has_carryover = False
    for schedule, panel in zip(schedules, panels):
        expected, substitutes, dose = reference_world(market, schedule, events, shocks,
                                                           pool_shocks)
        # The loop path of the model of docs/model.md (thinning: Lewis & Shedler 1979) must
        # equal the vectorized path exactly (STYLE.md section 5).
        for field in FIELDS:
            np.testing.assert_array_equal(getattr(panel, field), expected[field], err_msg=field)
        lost += int(expected["pool_lost"].sum())
        substituted += substitutes
        has_carryover |= any(0 < d < 1 for row in dose for d in row)
    # Each case exercises what it is named for: stock-outs, substitutions, carryover doses.
    assert lost > 0
    assert (substituted > 0) == (scenario.pools.on_stockout == "substitute")
    assert has_carryover == (scenario.effect.carryover_half_life_hours > 0)
