"""The market-wide trend and the pools' own demand multipliers against their closed forms."""

from __future__ import annotations

import numpy as np
import pytest

from spillgauge.errors import ScenarioError
from spillgauge.market.build import build_market
from spillgauge.market.calendar import draw_pool_shocks, trend_multiplier
from spillgauge.scenario import Pools
from spillgauge.schedule import AssignmentSchedule
from spillgauge.worlds.engine import simulate_worlds
from tests.conftest import make_scenario


def test_pool_ar1_shocks_have_mean_one_stationary_variance_and_autocorrelation():
    s, rho, n_pools, days = 0.3, 0.6, 4000, 40
    m = draw_pool_shocks(Pools(shock_sd=s, shock_autocorrelation=rho), n_pools, days,
                         rng=np.random.default_rng(11))
    x = np.log(m) + s * s / 2
    # Stationary AR(1) x_d = rho x_(d-1) + u_d with Var(u) = s^2 (1 - rho^2): Var(x) =
    # Var(u) / (1 - rho^2) = s^2 and Corr(x_d, x_(d-1)) = rho (Hamilton 1994, Time Series
    # Analysis, section 3.4); the lognormal mean E[exp(x - s^2/2)] = 1.
    n = x.size
    assert abs(m.mean() - 1) < 4 * m.std() / np.sqrt(n / (1 + 2 * rho / (1 - rho)))
    assert x.var() == pytest.approx(s * s, rel=0.03)
    lag1 = np.mean(x[:, 1:] * x[:, :-1]) / x.var()
    assert lag1 == pytest.approx(rho, abs=0.02)
    # Pools are independent of each other (no factors): cross-pool correlation ~ 0.
    assert abs(np.corrcoef(x[0::2, 10], x[1::2, 10])[0, 1]) < 4 / np.sqrt(n_pools / 2)


def test_factor_multipliers_have_mean_one_and_the_variance_of_a_loaded_random_walk():
    q, days, reps = 0.1, 10, 20000
    rng = np.random.default_rng(5)
    logs = np.stack([np.log(draw_pool_shocks(Pools(factor_count=1, factor_sd=q), 1, days,
                                             rng=rng)[0]) for _ in range(reps)])
    d = np.arange(days)
    v = (d + 1) * q * q
    # log m_d = l f_d - v l^2 / 2 with l ~ N(0, 1), f_d ~ N(0, v) independent, v = (d + 1) q^2:
    # Var(l f_d) = v, Var(v l^2 / 2) = v^2 / 2 (Var(chi^2_1) = 2), the two uncorrelated, so
    # Var(log m_d) = v + v^2 / 2 (derived on paper from the model in docs/model.md); and
    # E[m_d | l] = 1, so E[m_d] = 1 (lognormal mean).
    np.testing.assert_allclose(logs.var(axis=0), v + v * v / 2, rtol=0.05)
    m = np.exp(logs)
    assert np.all(np.abs(m.mean(axis=0) - 1) < 4 * m.std(axis=0) / np.sqrt(reps))


@pytest.mark.parametrize("factor_count", [1, 2, 3])
def test_factor_multipliers_have_the_factor_rank(factor_count):
    # Interactive fixed effects (Abadie, Diamond & Hainmueller 2010, eq. 1): the day-to-day
    # changes of the pools' log multipliers are lambda_k . (f_d - f_(d-1)) plus a pool
    # constant, so once each pool's mean change is removed the (pools x days) matrix has
    # rank factor_count.
    m = draw_pool_shocks(Pools(factor_count=factor_count, factor_sd=0.1), 12, 30,
                         rng=np.random.default_rng(factor_count))
    change = np.diff(np.log(m), axis=1)
    change -= change.mean(axis=1, keepdims=True)
    assert np.linalg.matrix_rank(change, tol=1e-9) == factor_count


def test_trend_multiplies_weekly_demand_by_one_plus_the_trend():
    # Ample stock, no treatment: expected orders in week 2 / week 1 = integral of
    # (1 + g)^(h / 168) over each week = (1 + g) (closed form of the geometric trend).
    g = 0.4
    scenario = make_scenario(users={"count": 3000, "orders_per_week": 7.0},
                             pools={"count": 3, "stock_cover": 50.0},
                             calendar={"days": 14, "trend_per_week": g})
    market = build_market(scenario, 1)
    schedule = AssignmentSchedule.fixed(n_users=market.n_users, n_ticks=scenario.calendar.n_ticks,
                                        is_treated=False)
    panel = simulate_worlds(market, [schedule], rng=np.random.default_rng(2))[0]
    week = panel.fulfilled.sum(axis=0)
    first, second = week[:7].sum(), week[7:].sum()
    # Poisson counts: SE of the log ratio ~ sqrt(1/first + 1/second).
    assert abs(np.log(second / first) - np.log1p(g)) < 4 * np.sqrt(1 / first + 1 / second)
    assert trend_multiplier(np.array([84.0]), g)[0] == pytest.approx(np.sqrt(1 + g))


def test_pool_shocks_leave_expected_demand_unchanged():
    # Mean-one multipliers: the expected all-control demand equals the market's without
    # them (ample stock). Compare means over 30 replications with their MC SE.
    base = dict(users={"count": 400, "orders_per_week": 7.0}, pools={"count": 8,
                                                                        "stock_cover": 50.0},
                calendar={"days": 7})
    shocked = make_scenario(**{**base, "pools": {**base["pools"], "shock_sd": 0.3,
                                                   "shock_autocorrelation": 0.5,
                                                   "factor_count": 2, "factor_sd": 0.1}})
    market = build_market(shocked, 0)
    schedule = AssignmentSchedule.fixed(n_users=market.n_users,
                                        n_ticks=shocked.calendar.n_ticks, is_treated=False)
    totals = np.array([simulate_worlds(market, [schedule], rng=np.random.default_rng(r))[0]
                       .fulfilled.sum() for r in range(30)])
    expected = market.population.rate_per_hour.sum() * 7 * 24
    assert abs(totals.mean() - expected) < 4 * totals.std(ddof=1) / np.sqrt(totals.size)


@pytest.mark.parametrize(("section", "key", "value"), [
    ("calendar", "trend_per_week", -0.9), ("pools", "shock_sd", 2.0),
    ("pools", "shock_autocorrelation", 1.0), ("pools", "factor_count", -1),
    ("pools", "factor_sd", 0.9)])
def test_bad_market_multiplier_keys_are_named(section, key, value):
    with pytest.raises(ScenarioError, match=rf"{section}\.{key}"):
        make_scenario(**{section: {key: value}})


def test_factor_sd_without_factors_is_refused_by_name():
    with pytest.raises(ScenarioError, match=r"pools\.factor_count"):
        make_scenario(pools={"factor_sd": 0.1})
