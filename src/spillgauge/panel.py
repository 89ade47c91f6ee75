"""OutcomePanel: what one world produced, per user and per pool."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from spillgauge.schedule import read_only_view

__all__ = ["OutcomePanel", "sum_days_in_order"]


def sum_days_in_order(days: np.ndarray) -> np.ndarray:
    """Return each row's sum over days, added left to right (day 0 first).

    A fixed order of additions makes a float outcome's total (revenue) the same
    bit for bit wherever it is summed: from the world's order events (which skip
    days without orders; adding 0.0 changes nothing), from a team's daily rows, or
    over a prefix of days. Integer tables give the plain sum.

    >>> sum_days_in_order(np.array([[0.1, 0.2, 0.3], [1.0, 0.0, 2.0]])).tolist()
    [0.6000000000000001, 3.0]
    """
    days = np.asarray(days)
    total = np.zeros(days.shape[0], dtype=days.dtype if days.dtype.kind == "f" else np.int64)
    for d in range(days.shape[1]):
        total = total + days[:, d]
    return total


@dataclass(frozen=True, eq=False, slots=True)
class OutcomePanel:
    """Outcomes of one world.

    Per-user outcomes are always kept as totals over the horizon; the per-user
    daily tables are kept only when the world was simulated with them
    (``simulate_worlds(..., user_days=True)``), for the designs, plans and reports
    that look at days.

    Parameters
    ----------
    fulfilled : ndarray of int, shape (n_users, n_days), or None
        Orders of each user fulfilled on each day (from any pool); None when the
        world tallied per-user totals only.
    demanded : ndarray of int, shape (n_users, n_days), or None
        Orders each user placed on each day (fulfilled or not); None with ``fulfilled``.
    pool_of_user : ndarray of int, shape (n_users,)
        Home stock pool of each user.
    history : ndarray of float, shape (n_users,)
        Orders of each user in the pre-period (before the experiment); zeros when
        the scenario has no pre-period.
    pool_fulfilled, pool_demanded, pool_lost : ndarray of int, shape (n_pools, n_ticks)
        Orders of each pool's users fulfilled, placed and lost in each tick.
    pool_stock : ndarray of int, shape (n_pools, n_ticks)
        Stock level of each pool at the end of each tick.
    tick_hours : int
        Length of one tick in hours.
    fulfilled_total, demanded_total : ndarray of int, shape (n_users,), optional
        Each user's orders fulfilled and placed over the horizon; summed from the
        daily tables when not given, required when those are None.
    outcome_total : ndarray, shape (n_users,), optional
        Each user's outcome over the horizon, the quantity the estimators analyse
        (``[study] outcome``): fulfilled orders (the default, ``fulfilled_total``
        itself), revenue (orders x the user's basket value) or conversion (1 when
        the user had at least one fulfilled order).
    outcome_days : ndarray, shape (n_users, n_days), optional
        The outcome's flow per user and day: orders, revenue, or 1 on the day of
        the user's first fulfilled order (so a prefix of days sums to the outcome
        over those days); defaults to ``fulfilled``.
    pool_outcome : ndarray, shape (n_pools, n_ticks), optional
        The outcome's flow per pool tick summed over the pool's users (conversion:
        users whose first fulfilled order fell in the tick); defaults to
        ``pool_fulfilled``.
    pre_outcome : ndarray of float, shape (n_users,), optional
        The outcome's pre-period analogue, the covariate of regression adjustment
        (CUPED): pre-period orders (the default, ``history`` itself), their value
        (revenue: pre-period orders x basket value) or whether the user ordered in
        the pre-period (conversion).
    """

    fulfilled: np.ndarray | None
    demanded: np.ndarray | None
    pool_of_user: np.ndarray
    history: np.ndarray
    pool_fulfilled: np.ndarray
    pool_demanded: np.ndarray
    pool_lost: np.ndarray
    pool_stock: np.ndarray
    tick_hours: int = 1
    fulfilled_total: np.ndarray | None = None
    demanded_total: np.ndarray | None = None
    outcome_total: np.ndarray | None = None
    outcome_days: np.ndarray | None = None
    pool_outcome: np.ndarray | None = None
    pre_outcome: np.ndarray | None = None

    def __post_init__(self) -> None:
        n_users = self.pool_of_user.shape[0]
        if (self.fulfilled is None) != (self.demanded is None):
            raise ValueError("fulfilled and demanded must both be given or both be None")
        if self.fulfilled is not None:
            n_days = self.fulfilled.shape[1]
            if self.fulfilled.shape != (n_users, n_days):
                raise ValueError("fulfilled must have shape (n_users, n_days)")
            if self.demanded.shape != (n_users, n_days):
                raise ValueError("demanded must have the shape of fulfilled")
            for name, table in (("fulfilled_total", self.fulfilled),
                                ("demanded_total", self.demanded)):
                if getattr(self, name) is None:
                    object.__setattr__(self, name, table.sum(axis=1, dtype=np.int64))
        elif self.fulfilled_total is None or self.demanded_total is None:
            raise ValueError("fulfilled_total and demanded_total are needed without daily tables")
        if self.outcome_total is None:  # the orders themselves, or the sum of the days
            object.__setattr__(self, "outcome_total", self.fulfilled_total
                               if self.outcome_days is None
                               else sum_days_in_order(self.outcome_days))
        for name, default in (("outcome_days", self.fulfilled),
                              ("pool_outcome", self.pool_fulfilled)):
            if getattr(self, name) is None:
                object.__setattr__(self, name, default)
        if (self.outcome_days is None) != (self.fulfilled is None):
            raise ValueError("outcome_days must be given exactly when fulfilled is")
        for name in ("fulfilled_total", "demanded_total", "outcome_total"):
            if getattr(self, name).shape != (n_users,):
                raise ValueError(f"{name} must have shape (n_users,)")
        if self.fulfilled is not None and self.outcome_days.shape != self.fulfilled.shape:
            raise ValueError("outcome_days must have the shape of fulfilled")
        if self.pool_of_user.shape != (n_users,) or self.history.shape != (n_users,):
            raise ValueError("pool_of_user and history must have shape (n_users,)")
        if self.pre_outcome is None:
            object.__setattr__(self, "pre_outcome", self.history)
        elif self.pre_outcome.shape != (n_users,):
            raise ValueError("pre_outcome must have shape (n_users,)")
        shape = self.pool_fulfilled.shape
        for name in ("pool_demanded", "pool_lost", "pool_stock", "pool_outcome"):
            if getattr(self, name).shape != shape:
                raise ValueError(f"{name} must have the shape of pool_fulfilled {shape}")
        for name in ("fulfilled", "demanded", "pool_of_user", "history", "pool_fulfilled",
                     "pool_demanded", "pool_lost", "pool_stock", "fulfilled_total",
                     "demanded_total", "outcome_total", "outcome_days", "pool_outcome",
                     "pre_outcome"):
            if getattr(self, name) is not None:
                object.__setattr__(self, name, read_only_view(getattr(self, name)))

    @property
    def n_users(self) -> int:
        """Number of users."""
        return int(self.pool_of_user.shape[0])

    @property
    def has_user_days(self) -> bool:
        """Whether the per-user daily tables were kept."""
        return self.fulfilled is not None

    @property
    def n_days(self) -> int:
        """Number of days."""
        if self.fulfilled is not None:
            return int(self.fulfilled.shape[1])
        return self.n_ticks * self.tick_hours // 24

    @property
    def n_pools(self) -> int:
        """Number of stock pools."""
        return int(self.pool_fulfilled.shape[0])

    @property
    def n_ticks(self) -> int:
        """Number of ticks."""
        return int(self.pool_fulfilled.shape[1])

    def user_fulfilled(self) -> np.ndarray:
        """Return each user's fulfilled orders over the horizon, shape ``(n_users,)``."""
        return self.fulfilled_total.astype(float)

    def user_outcome(self) -> np.ndarray:
        """Return each user's outcome over the horizon as floats, shape ``(n_users,)``.

        This is what the estimators analyse; with the default outcome (orders) it
        equals :meth:`user_fulfilled`.
        """
        return self.outcome_total.astype(float)

    def user_demanded(self) -> np.ndarray:
        """Return each user's placed orders over the horizon, shape ``(n_users,)``."""
        return self.demanded_total.astype(float)

    def users_per_pool(self) -> np.ndarray:
        """Return the number of users whose home is each pool, shape ``(n_pools,)``."""
        return np.bincount(self.pool_of_user, minlength=self.n_pools)

    @classmethod
    def from_arrays(cls, **arrays: np.ndarray | int) -> OutcomePanel:
        """Build a panel; missing per-pool arrays are derived from the user arrays.

        Meant for tests and for estimators' worked examples: ``fulfilled`` (and
        optionally ``demanded``, ``pool_of_user``, ``history``) per user and day.
        Per-pool tables then have one tick per day.

        >>> p = OutcomePanel.from_arrays(fulfilled=np.array([[1], [2], [3]]))
        >>> p.user_fulfilled().tolist(), p.n_pools
        ([1.0, 2.0, 3.0], 1)
        """
        fulfilled = np.asarray(arrays.pop("fulfilled"))
        if fulfilled.ndim == 1:
            fulfilled = fulfilled[:, None]
        n_users, n_days = fulfilled.shape
        demanded = np.asarray(arrays.pop("demanded", fulfilled))
        if demanded.ndim == 1:
            demanded = demanded[:, None]
        pool_of_user = np.asarray(arrays.pop("pool_of_user", np.zeros(n_users, dtype=np.int64)))
        history = np.asarray(arrays.pop("history", np.zeros(n_users)), dtype=float)
        n_pools = int(pool_of_user.max()) + 1 if n_users else 1

        def by_pool(values: np.ndarray) -> np.ndarray:
            out = np.zeros((n_pools, n_days), dtype=np.int64)
            if values.dtype.kind not in "biu":
                np.add.at(out, pool_of_user, values)  # refuses non-integer orders, as before
                return out
            cell = (pool_of_user[:, None] * n_days + np.arange(n_days)).ravel()
            sums = np.bincount(cell, weights=values.ravel(), minlength=n_pools * n_days)
            return out + sums.astype(np.int64).reshape(n_pools, n_days)

        pool_fulfilled = arrays.pop("pool_fulfilled", None)
        pool_fulfilled = by_pool(fulfilled) if pool_fulfilled is None else pool_fulfilled
        pool_demanded = arrays.pop("pool_demanded", None)
        pool_demanded = by_pool(demanded) if pool_demanded is None else pool_demanded
        pool_lost = arrays.pop("pool_lost", np.asarray(pool_demanded) - np.asarray(pool_fulfilled))
        pool_stock = arrays.pop("pool_stock", np.zeros_like(np.asarray(pool_fulfilled)))
        return cls(fulfilled=fulfilled, demanded=demanded, pool_of_user=pool_of_user,
                   history=history, pool_fulfilled=np.asarray(pool_fulfilled),
                   pool_demanded=np.asarray(pool_demanded), pool_lost=np.asarray(pool_lost),
                   pool_stock=np.asarray(pool_stock), **arrays)
