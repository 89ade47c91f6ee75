"""The calendar: ticks, the diurnal demand rhythm and the stock-event times."""

from __future__ import annotations

import numpy as np

from spillgauge.scenario import Calendar, Pools

__all__ = ["diurnal_multiplier", "day_of_tick", "stock_event_hours", "segment_bounds",
           "draw_daily_shocks"]

_TWO_PI_24 = 2.0 * np.pi / 24.0


def diurnal_multiplier(hours: np.ndarray, amplitude: float) -> np.ndarray:
    """Return the demand multiplier ``1 + a*sin(2*pi*(hour - 6)/24)`` at each time.

    Parameters
    ----------
    hours : ndarray of float
        Times in hours since the start of the horizon (continuous).
    amplitude : float
        ``calendar.diurnal_amplitude`` in ``[0, 1)``; 0 gives a flat 1.

    Examples
    --------
    >>> diurnal_multiplier(np.array([0.0, 6.0, 12.0]), 0.5).round(6).tolist()
    [0.5, 1.0, 1.5]
    """
    hours = np.asarray(hours, dtype=float)
    if amplitude == 0:
        return np.ones_like(hours)
    return 1.0 + amplitude * np.sin(_TWO_PI_24 * (np.mod(hours, 24.0) - 6.0))


def day_of_tick(calendar: Calendar) -> np.ndarray:
    """Return the day index of every tick, shape ``(n_ticks,)``."""
    return np.arange(calendar.n_ticks) * calendar.tick_hours // 24


def stock_event_hours(pools: Pools, horizon_hours: int) -> tuple[np.ndarray, np.ndarray]:
    """Return the review times and the delivery times of the restock policy, in hours.

    Every ``restock_every_hours`` (starting at hour 0) each pool orders up to
    its level S; the order arrives ``lead_time_hours`` later (at once when the
    lead time is 0). Times at or after the horizon are left out.

    Examples
    --------
    >>> from spillgauge.scenario import Pools
    >>> reviews, deliveries = stock_event_hours(Pools(restock_every_hours=24,
    ...                                               lead_time_hours=6), 72)
    >>> reviews.tolist(), deliveries.tolist()
    ([0, 24, 48], [6, 30, 54])
    """
    reviews = np.arange(0, horizon_hours, pools.restock_every_hours)
    deliveries = reviews + pools.lead_time_hours
    return reviews, deliveries[deliveries < horizon_hours]


def segment_bounds(pools: Pools, calendar: Calendar, *, every_tick: bool) -> np.ndarray:
    """Return the tick indices where stock can change, plus the horizon's end.

    Between two consecutive bounds no pool is restocked, so within such a
    *segment* a pool's orders are served from one stock level in arrival order.
    With ``every_tick`` each tick is its own segment (needed when a stock-out
    sends orders to another pool).

    Examples
    --------
    >>> from spillgauge.scenario import Calendar, Pools
    >>> segment_bounds(Pools(restock_every_hours=12, lead_time_hours=3),
    ...                Calendar(days=1), every_tick=False).tolist()
    [0, 3, 12, 15, 24]
    """
    n_ticks = calendar.n_ticks
    if every_tick:
        return np.arange(n_ticks + 1)
    reviews, deliveries = stock_event_hours(pools, calendar.horizon_hours)
    hours = np.union1d(reviews, deliveries)
    return np.append(hours // calendar.tick_hours, n_ticks).astype(np.int64)


def draw_daily_shocks(calendar: Calendar, *, rng: np.random.Generator) -> np.ndarray:
    """Draw the market-wide demand multiplier of each day, shape ``(days,)``.

    ``log m_d = s_d - sd^2 / 2`` with ``s_d`` a stationary AR(1) process of
    standard deviation ``daily_shock_sd`` and autocorrelation
    ``daily_shock_autocorrelation``, so ``E[m_d] = 1``. All ones when the SD is 0
    (then nothing is drawn).

    >>> draw_daily_shocks(Calendar(days=3), rng=np.random.default_rng(0)).tolist()
    [1.0, 1.0, 1.0]
    """
    sd, rho = calendar.daily_shock_sd, calendar.daily_shock_autocorrelation
    if sd == 0:
        return np.ones(calendar.days)
    noise = rng.standard_normal(calendar.days)
    state = np.empty(calendar.days)
    state[0] = sd * noise[0]
    innovation = sd * np.sqrt(1.0 - rho * rho)
    for day in range(1, calendar.days):
        state[day] = rho * state[day - 1] + innovation * noise[day]
    return np.exp(state - sd * sd / 2.0)
