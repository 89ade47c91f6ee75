"""The engine against closed forms: Poisson demand, lost-sales inventory, random-order service."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from spillgauge.designs import draw_switchback_schedule, draw_user_schedule
from spillgauge.market.build import build_market
from spillgauge.schedule import AssignmentSchedule
from spillgauge.worlds.engine import simulate_worlds
from tests.conftest import make_scenario


def _fixed(market, treated: bool) -> AssignmentSchedule:
    return AssignmentSchedule.fixed(n_users=market.n_users,
                                    n_ticks=market.scenario.calendar.n_ticks, is_treated=treated)


def _truth_worlds(market, reps: int, seed: int = 0):
    schedules = [_fixed(market, False), _fixed(market, True)]
    for r in range(reps):
        yield simulate_worlds(market, schedules, rng=np.random.default_rng([seed, r]))


def test_gte_without_interference_is_lift_times_orders():
    # Closed form (no stock-outs, no peers, no carryover): GTE = lift x expected orders,
    # i.e. lift x orders_per_week x days / 7 (issue's reference value).
    lift, per_week, days = 0.3, 2.0, 14
    scenario = make_scenario(users={"count": 3000, "orders_per_week": per_week},
                             pools={"count": 5, "stock_cover": 200.0},
                             calendar={"days": days, "diurnal_amplitude": 0.4},
                             effect={"lift": lift})
    market = build_market(scenario, 1)
    gte = np.array([p[1].user_fulfilled().mean() - p[0].user_fulfilled().mean()
                    for p in _truth_worlds(market, 30)])
    mc_se = gte.std(ddof=1) / np.sqrt(gte.size)
    realised = lift * market.population.rate_per_hour.mean() * days * 24
    assert abs(gte.mean() - realised) < 4 * mc_se
    # The nominal formula also holds once the market's own sampling of rates is allowed for:
    # the mean of n Gamma(shape 2) rates has relative SD 1/sqrt(2n).
    nominal = lift * per_week * days / 7
    market_se = nominal / np.sqrt(2 * market.n_users)
    assert abs(gte.mean() - nominal) < 4 * (mc_se + market_se)


@pytest.mark.parametrize("amplitude", [0.0, 0.5])
def test_lost_sales_match_poisson_expected_sales(tmp_path, amplitude):
    # Periodic-review order-up-to S, zero lead time, lost sales: sales per cycle are
    # min(D, S) with D ~ Poisson(lambda) (Zipkin 2000, Foundations of Inventory
    # Management; formula E[min(D,S)] = sum_{k<S} P(D > k), computed with scipy.stats.poisson).
    # lambda = 10, S = 10 gives 8.748900 (REFERENCES.md section 7 table, [CALC]).
    users = tmp_path / "users.csv"
    users.write_text("user_id,pool_id,orders_per_week\n"
                     + "".join(f"u{i},p0,7\n" for i in range(10)))  # 10 users x 1 order/day
    pools = tmp_path / "pools.csv"
    pools.write_text("pool_id,order_up_to\np0,10\n")
    scenario = make_scenario(users={"file": str(users)}, pools={"file": str(pools)},
                             calendar={"days": 60, "diurnal_amplitude": amplitude},
                             effect={"lift": 0.0}, base_dir=tmp_path)
    market = build_market(scenario, 3)
    expected = stats.poisson.sf(np.arange(10), 10.0).sum()
    assert expected == pytest.approx(8.748900, abs=1e-6)
    daily = np.concatenate([p[0].fulfilled.sum(axis=0) for p in _truth_worlds(market, 40)])
    se = daily.std(ddof=1) / np.sqrt(daily.size)
    assert abs(daily.mean() - expected) < 4 * se
    assert daily.max() <= 10


def test_lead_time_delivers_the_review_order_later(tmp_path):
    # Order-up-to with lead time L: the order placed at a review (S minus the level) arrives
    # L hours later, so the stock path dips between review and delivery (common practice,
    # no source: periodic review with lead time shorter than the review period).
    users = tmp_path / "users.csv"
    users.write_text("user_id,pool_id,orders_per_week\n"
                     + "".join(f"u{i},p0,14\n" for i in range(10)))
    pools = tmp_path / "pools.csv"
    pools.write_text("pool_id,order_up_to\np0,15\n")
    scenario = make_scenario(users={"file": str(users)}, pools={"file": str(pools),
                             "lead_time_hours": 6}, calendar={"days": 10}, effect={"lift": 0.0},
                             base_dir=tmp_path)
    market = build_market(scenario, 0)
    panel = next(_truth_worlds(market, 1))[0]
    stock = panel.pool_stock[0]
    sold = panel.pool_fulfilled[0]
    level = 15
    on_order = 0
    for tick in range(stock.size):
        if tick % 24 == 0:
            on_order = 15 - level
        if tick % 24 == 6:
            level += on_order
            on_order = 0
        level -= sold[tick]
        assert stock[tick] == level
        assert level >= 0


def test_random_order_service_is_hypergeometric(tmp_path):
    # When a pool's demand in a tick exceeds its stock, treated orders filled follow
    # Hypergeom(M = D, n = D_T, N = S) (random-order service; scipy.stats.hypergeom's
    # parametrization, REFERENCES.md section 7).
    n_users = 40
    users = tmp_path / "users.csv"
    users.write_text("user_id,pool_id,orders_per_week\n"
                     + "".join(f"u{i},p0,3.5\n" for i in range(n_users)))  # 20 orders / day
    pools = tmp_path / "pools.csv"
    pools.write_text("pool_id,order_up_to\np0,12\n")
    scenario = make_scenario(users={"file": str(users)}, pools={"file": str(pools)},
                             calendar={"days": 30, "tick_hours": 24}, effect={"lift": 0.5},
                             base_dir=tmp_path)
    market = build_market(scenario, 5)
    records = []
    for r in range(60):
        schedule = draw_user_schedule(n_users, 30, rng=np.random.default_rng([9, r]))
        panel = simulate_worlds(market, [schedule], rng=np.random.default_rng([7, r]))[0]
        treated = schedule.user_is_treated()
        d_t = panel.demanded[treated].sum(axis=0)
        d_c = panel.demanded[~treated].sum(axis=0)
        x = panel.fulfilled[treated].sum(axis=0)
        records.append(np.stack([d_t, d_c, x], axis=1))
    table = np.concatenate(records)
    binding = table[:, 0] + table[:, 1] > 12
    d_t, d_c, x = table[binding].T
    law = stats.hypergeom(d_t + d_c, d_t, 12)
    z = (x - law.mean()).sum() / np.sqrt(law.var().sum())
    assert abs(z) < 4
    # The probability integral transform of each day's count under its own law is uniform
    # on average: mean CDF mid-point is 1/2 (randomised PIT for discrete laws).
    pit = (law.cdf(x) + law.cdf(x - 1)) / 2
    assert abs(pit.mean() - 0.5) < 4 * np.sqrt(1 / 12 / pit.size) + 0.02


def test_peer_exposure_multiplies_rates():
    # Rate formula of the scenario spec: everyone treated multiplies a connected user's rate
    # by (1 + lift)(1 + peer_lift); isolated users get (1 + lift).
    lift, peer = 0.2, 0.5
    scenario = make_scenario(users={"count": 4000, "orders_per_week": 3.0},
                             pools={"count": 4, "stock_cover": 500.0}, calendar={"days": 7},
                             graph={"model": "small_world", "mean_degree": 4},
                             effect={"lift": lift, "peer_lift": peer})
    market = build_market(scenario, 2)
    control = treated = 0.0
    for panels in _truth_worlds(market, 10):
        control += panels[0].user_demanded().sum()
        treated += panels[1].user_demanded().sum()
    ratio = treated / control
    # Delta-method SE of a ratio of two Poisson totals (upper bound: independent).
    se = ratio * np.sqrt(1 / treated + 1 / control)
    assert abs(ratio - (1 + lift) * (1 + peer)) < 4 * se


def test_isolated_users_ignore_peer_lift():
    # With a graph of isolated users e_i = 0, so peer_lift cannot change any world.
    base = dict(users={"count": 500}, pools={"count": 2, "stock_cover": 0.8},
                calendar={"days": 7}, graph={"model": "pool_blocks", "mean_degree": 0})
    a = build_market(make_scenario(effect={"lift": 0.2, "peer_lift": 0.0}, **base), 4)
    b = build_market(make_scenario(effect={"lift": 0.2, "peer_lift": 0.9}, **base), 4)
    pa = next(_truth_worlds(a, 1))
    pb = next(_truth_worlds(b, 1))
    for x, y in zip(pa, pb):
        np.testing.assert_array_equal(x.fulfilled, y.fulfilled)


def test_carryover_decays_with_the_half_life():
    # Carryover: after the market leaves treatment the dose is 2^(-t / half_life), so the
    # extra demand over the control world decays with that half-life; fit it back by least
    # squares on log(extra) (closed form of the rate formula).
    half_life = 6.0
    scenario = make_scenario(users={"count": 20000, "orders_per_week": 10.0},
                             pools={"count": 1, "stock_cover": 1000.0}, calendar={"days": 4},
                             effect={"lift": 1.0, "carryover_half_life_hours": half_life})
    market = build_market(scenario, 0)
    n_ticks = scenario.calendar.n_ticks
    on = AssignmentSchedule(unit_of_user=np.zeros(market.n_users, dtype=np.int64),
                            is_treated=np.array([[True, False]]),
                            period_start_ticks=np.array([0, 24]), n_ticks=n_ticks,
                            unit_kind="market")
    extra = np.zeros(n_ticks)
    base = np.zeros(n_ticks)
    for r in range(6):
        control, switched = simulate_worlds(market, [_fixed(market, False), on],
                                            rng=np.random.default_rng([11, r]))
        extra += switched.pool_demanded[0] - control.pool_demanded[0]
        base += control.pool_demanded[0]
    after = np.arange(24, 24 + 30)
    ratio = extra[after] / base[after]
    keep = ratio > 0.02
    slope = np.polyfit(after[keep] - 23, np.log(ratio[keep]), 1)[0]
    fitted = -np.log(2) / slope
    assert fitted == pytest.approx(half_life, rel=0.1)
    # While treated, the ratio is the lift itself.
    assert extra[:24].sum() / base[:24].sum() == pytest.approx(1.0, rel=0.03)


def test_same_seed_same_numbers_different_seed_different():
    scenario = make_scenario(users={"count": 800}, pools={"count": 4, "stock_cover": 0.9},
                             graph={"model": "pool_blocks", "mean_degree": 6},
                             effect={"lift": 0.3, "peer_lift": 0.2}, calendar={"days": 7})
    market = build_market(scenario, 8)
    schedule = draw_switchback_schedule(market.pool_of_user, 168, block_ticks=12,
                                        rng=np.random.default_rng(1))
    first = simulate_worlds(market, [schedule], rng=np.random.default_rng(3))[0]
    again = simulate_worlds(market, [schedule], rng=np.random.default_rng(3))[0]
    other = simulate_worlds(market, [schedule], rng=np.random.default_rng(4))[0]
    for name in ("fulfilled", "demanded", "pool_stock", "pool_lost"):
        np.testing.assert_array_equal(getattr(first, name), getattr(again, name))
    assert not np.array_equal(first.fulfilled, other.fulfilled)


def test_worlds_share_candidate_arrivals():
    # Common random numbers: a world with a higher rate everywhere keeps a superset of the
    # lower world's orders (thinning of shared candidates), user by user and day by day.
    scenario = make_scenario(users={"count": 600}, pools={"count": 3, "stock_cover": 100.0},
                             calendar={"days": 7}, effect={"lift": 0.4})
    market = build_market(scenario, 1)
    control, treated = next(_truth_worlds(market, 1))
    assert np.all(treated.demanded >= control.demanded)


def test_substitution_serves_lost_orders_elsewhere():
    # A stock-out that substitutes sends orders to other pools: more orders are fulfilled than
    # with lost sales on the same random numbers' market, and never more than demanded.
    common = dict(users={"count": 2000}, calendar={"days": 7}, effect={"lift": 0.5})
    lost = build_market(make_scenario(pools={"count": 10, "stock_cover": 1.0,
                                             "demand_spread": 0.8}, **common), 2)
    sub = build_market(make_scenario(pools={"count": 10, "stock_cover": 1.0, "demand_spread": 0.8,
                                            "on_stockout": "substitute",
                                            "substitute_share": 1.0}, **common), 2)
    fl = [p[1].user_fulfilled().sum() for p in _truth_worlds(lost, 3)]
    fs = [p[1].user_fulfilled().sum() for p in _truth_worlds(sub, 3)]
    panel = next(_truth_worlds(sub, 1))[1]
    assert np.mean(fs) > np.mean(fl)
    assert np.all(panel.fulfilled <= panel.demanded)
    assert panel.pool_stock.min() >= 0


def test_per_user_totals_without_daily_tables_are_the_same_numbers():
    # Lean worlds: without the users x days tables a world keeps each user's totals, which
    # must equal the sums of the daily tables of the same world (a plain sum is the
    # reference), and every per-pool table is unchanged.
    scenario = make_scenario(users={"count": 900}, pools={"count": 4, "stock_cover": 0.9},
                             graph={"model": "pool_blocks", "mean_degree": 6},
                             effect={"lift": 0.3, "peer_lift": 0.2}, calendar={"days": 7})
    market = build_market(scenario, 8)
    schedules = [_fixed(market, False), _fixed(market, True),
                 draw_switchback_schedule(market.pool_of_user, 168, block_ticks=12,
                                          rng=np.random.default_rng(1))]
    full = simulate_worlds(market, schedules, rng=np.random.default_rng(3))
    lean = simulate_worlds(market, schedules, rng=np.random.default_rng(3), user_days=False)
    for a, b in zip(full, lean):
        assert a.has_user_days and not b.has_user_days and b.fulfilled is None
        np.testing.assert_array_equal(b.fulfilled_total, a.fulfilled.sum(axis=1))
        np.testing.assert_array_equal(b.demanded_total, a.demanded.sum(axis=1))
        np.testing.assert_array_equal(b.user_fulfilled(), a.user_fulfilled())
        for name in ("pool_fulfilled", "pool_demanded", "pool_lost", "pool_stock"):
            np.testing.assert_array_equal(getattr(b, name), getattr(a, name))
        assert (b.n_users, b.n_days, b.n_ticks) == (a.n_users, a.n_days, a.n_ticks)
