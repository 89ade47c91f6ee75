"""The outcome tables of a world against a plain loop over its order events."""

from __future__ import annotations

import numpy as np
import pytest

from spillgauge.worlds.outcome import outcome_tables


def _events(seed):
    rng = np.random.default_rng(seed)
    n_users, n_ticks, n_events = 9, 12, 60
    pool_of_user = np.sort(rng.integers(0, 3, n_users))
    user = rng.integers(0, n_users, n_events)
    return dict(user=user, tick=rng.integers(0, n_ticks, n_events), pool=pool_of_user[user],
                is_fulfilled=rng.random(n_events) < 0.7,
                basket_value=rng.lognormal(1.0, 0.5, n_users), pool_of_user=pool_of_user,
                n_ticks=n_ticks, day_of_tick=np.arange(n_ticks) // 4)


def _loop(outcome, e):
    """The slow reference: walk the events one by one (STYLE.md sec. 5, slow loop = kernel)."""
    n_users, n_ticks = e["pool_of_user"].size, e["n_ticks"]
    n_days = int(e["day_of_tick"][-1]) + 1
    total, days = np.zeros(n_users), np.zeros((n_users, n_days))
    pool = np.zeros((3, n_ticks))
    first = {}
    for u, t, ok in zip(e["user"], e["tick"], e["is_fulfilled"]):
        if not ok:
            continue
        if outcome == "revenue":
            v = e["basket_value"][u]
            total[u] += v
            days[u, e["day_of_tick"][t]] += v
            pool[e["pool_of_user"][u], t] += v
        elif u not in first or t < first[u]:
            first[u] = t
    for u, t in first.items():
        total[u] = 1.0
        days[u, e["day_of_tick"][t]] = 1.0
        pool[e["pool_of_user"][u], t] += 1.0
    return total, days, pool


@pytest.mark.parametrize("outcome", ["revenue", "conversion"])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_outcome_tables_equal_the_event_loop(outcome, seed):
    e = _events(seed)
    tables = outcome_tables(outcome, **e)
    total, days, pool = _loop(outcome, e)
    np.testing.assert_allclose(tables["outcome_total"], total, rtol=1e-12)
    np.testing.assert_allclose(tables["outcome_days"], days, rtol=1e-12)
    np.testing.assert_allclose(tables["pool_outcome"], pool, rtol=1e-12)


def test_orders_adds_nothing():
    assert outcome_tables("orders", **_events(0)) == {}
