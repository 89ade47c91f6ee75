"""The outcome a study analyses, tallied from one world's fulfilled order events.

``[study] outcome`` chooses what the estimators see per user:

- ``"orders"``: fulfilled orders (the panel's own order tables; nothing is added);
- ``"revenue"``: fulfilled orders times the user's basket value;
- ``"conversion"``: 1 when the user had at least one fulfilled order, else 0.

Each is kept as a *flow* that sums over time to the per-user outcome: orders and
revenue per tick; for conversion, 1 at the tick of the user's first fulfilled
order of the horizon. So any prefix of days sums to the outcome over those days
(conversion within the first d days), and a design that compares periods (a
switchback block, a rollout's pool-period) sees per period the users who
converted for the first time in it, per user: summed over the horizon, the
share of users who converted.
"""

from __future__ import annotations

import numpy as np

__all__ = ["outcome_tables", "pre_period_outcome"]


def pre_period_outcome(outcome: str, history: np.ndarray, basket_value: np.ndarray | None
                       ) -> np.ndarray:
    """Return the outcome's pre-period analogue per user: the covariate CUPED adjusts for.

    Orders: the pre-period orders themselves (the same array); revenue: pre-period
    orders x the user's basket value; conversion: 1 when the user ordered in the
    pre-period, else 0. Regression adjustment on the same metric measured before
    the experiment is the choice of Deng, Xu, Kohavi & Walker (2013).

    >>> h = np.array([0.0, 2.0, 5.0])
    >>> pre_period_outcome("revenue", h, np.array([3.0, 1.5, 2.0])).tolist()
    [0.0, 3.0, 10.0]
    >>> pre_period_outcome("conversion", h, None).tolist()
    [0.0, 1.0, 1.0]
    """
    if outcome == "orders":
        return history
    if outcome == "revenue":
        if basket_value is None:
            raise ValueError("revenue needs each user's basket value")
        return np.asarray(history, dtype=float) * basket_value
    if outcome == "conversion":
        return (np.asarray(history) > 0).astype(float)
    raise ValueError(f"unknown outcome {outcome!r}")


def outcome_tables(outcome: str, *, user: np.ndarray, tick: np.ndarray, pool: np.ndarray,
                   is_fulfilled: np.ndarray, basket_value: np.ndarray | None,
                   pool_of_user: np.ndarray, n_ticks: int, day_of_tick: np.ndarray | None,
                   keep_days: bool = True) -> dict:
    """Return the outcome's tables of one world as :class:`OutcomePanel` keyword arguments.

    Parameters
    ----------
    outcome : {"orders", "revenue", "conversion"}
    user, tick, pool : ndarray of int, shape (n_events,)
        Each order event's user, tick and (home) pool.
    is_fulfilled : ndarray of bool, shape (n_events,)
        Whether the world fulfilled the event.
    basket_value : ndarray of float, shape (n_users,), or None
        Each user's order value (needed for revenue).
    pool_of_user : ndarray of int, shape (n_users,)
    n_ticks : int
    day_of_tick : ndarray of int, shape (n_ticks,), or None
        Day of each tick. Revenue totals are summed day by day in day order
        (:func:`~spillgauge.panel.sum_days_in_order`), so they equal the sum of the
        daily table bit for bit; None keeps totals only and sums them in one step.
    keep_days : bool, default True
        Whether to return the per-user daily flow (needs ``day_of_tick``).

    Returns
    -------
    dict
        ``outcome_total`` (n_users,), ``pool_outcome`` (n_pools, n_ticks) and, with
        ``day_of_tick``, ``outcome_days`` (n_users, n_days); empty for orders.

    Examples
    --------
    Two users in one pool over three ticks (one tick a day); user 0's orders at
    ticks 1 and 2 are fulfilled, user 1's order at tick 0 is not:

    >>> kw = dict(user=np.array([0, 0, 1]), tick=np.array([1, 2, 0]), pool=np.zeros(3, int),
    ...           is_fulfilled=np.array([True, True, False]), basket_value=np.array([2.0, 5.0]),
    ...           pool_of_user=np.zeros(2, int), n_ticks=3, day_of_tick=np.arange(3))
    >>> t = outcome_tables("conversion", **kw)
    >>> t["outcome_total"].tolist(), t["pool_outcome"].tolist(), t["outcome_days"].tolist()
    ([1.0, 0.0], [[0.0, 1.0, 0.0]], [[0.0, 1.0, 0.0], [0.0, 0.0, 0.0]])
    >>> outcome_tables("revenue", **kw)["outcome_total"].tolist()
    [4.0, 0.0]
    """
    if outcome == "orders":
        return {}
    n_users, n_pools = pool_of_user.size, int(pool_of_user.max(initial=-1)) + 1
    n_pools = max(n_pools, int(pool.max(initial=-1)) + 1)
    done_user, done_tick = user[is_fulfilled], tick[is_fulfilled]
    if outcome == "revenue":
        if basket_value is None:
            raise ValueError("revenue needs each user's basket value")
        weight = basket_value[done_user]
        cell = pool[is_fulfilled] * n_ticks + done_tick
        tables = {"outcome_total": _revenue_totals(done_user, done_tick, basket_value,
                                                   day_of_tick)}
        flow_user, flow_tick = done_user, done_tick
    elif outcome == "conversion":
        first = np.full(n_users, n_ticks, dtype=np.int64)
        np.minimum.at(first, done_user, done_tick)
        flow_user = np.flatnonzero(first < n_ticks)
        flow_tick = first[flow_user]
        weight = np.ones(flow_user.size)
        cell = pool_of_user[flow_user] * n_ticks + flow_tick
        tables = {"outcome_total": (first < n_ticks).astype(float)}
    else:
        raise ValueError(f"unknown outcome {outcome!r}")
    tables["pool_outcome"] = np.bincount(cell, weights=weight, minlength=n_pools * n_ticks
                                         ).reshape(n_pools, n_ticks)
    if day_of_tick is not None and keep_days:
        n_days = int(day_of_tick[-1]) + 1 if day_of_tick.size else 0
        index = flow_user * n_days + day_of_tick[flow_tick]
        days = np.bincount(index, minlength=n_users * n_days).reshape(n_users, n_days)
        # revenue: each user's daily orders times the user's value (as the totals are)
        scale = basket_value[:, None] if outcome == "revenue" else 1.0
        tables["outcome_days"] = days * scale
    return tables


def _revenue_totals(done_user: np.ndarray, done_tick: np.ndarray, basket_value: np.ndarray,
                    day_of_tick: np.ndarray | None) -> np.ndarray:
    """Return each user's revenue: day by day, each day's orders x value, added in day order.

    The same additions as :func:`~spillgauge.panel.sum_days_in_order` over the
    daily table (days without orders add 0.0, which changes nothing), without
    building that (n_users, n_days) table.
    """
    n_users = basket_value.size
    if day_of_tick is None:
        return np.bincount(done_user, minlength=n_users) * basket_value
    n_days = int(day_of_tick[-1]) + 1 if day_of_tick.size else 1
    cell, count = np.unique(done_user.astype(np.int64) * n_days + day_of_tick[done_tick],
                            return_counts=True)  # sorted by user, then day
    user = cell // n_days
    value = count * basket_value[user]
    starts = np.flatnonzero(np.r_[True, user[1:] != user[:-1]]) if user.size else user
    rank = np.arange(user.size) - np.repeat(starts, np.diff(np.r_[starts, user.size]))
    total = np.zeros(n_users)
    for k in range(int(rank.max(initial=-1)) + 1):  # k-th day with orders of each user
        at = rank == k
        total[user[at]] = total[user[at]] + value[at]
    return total
