"""The calendar: ticks, the diurnal demand rhythm, the daily shocks and the stock calendar.

The stock calendar (when pools are reviewed and deliveries arrive) is one simpy
process, :func:`start_stock_calendar`. The engine runs it to move stock; the
segment bounds that group order events for vectorized serving are derived from
the same process (:func:`stock_event_hours`, :func:`segment_bounds`).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import simpy

from spillgauge.scenario import Calendar, Pools
from spillgauge.seeding import check_rng

__all__ = ["diurnal_multiplier", "day_of_tick", "start_stock_calendar", "stock_event_hours",
           "segment_bounds", "draw_daily_shocks", "trend_multiplier", "draw_pool_shocks"]

_TWO_PI_24 = 2.0 * np.pi / 24.0


def diurnal_multiplier(hours: np.ndarray, amplitude: float, *, day: np.ndarray | None = None
                       ) -> np.ndarray:
    """Return the demand multiplier ``1 + a*sin(2*pi*(hour - 6)/24)`` at each time.

    Parameters
    ----------
    hours : ndarray of float
        Times in hours since the start of the horizon (continuous).
    amplitude : float
        ``calendar.diurnal_amplitude`` in ``[0, 1)``; 0 gives a flat 1.
    day : ndarray of int, optional
        ``floor(hour / 24)`` of each time, when the caller has it: the hour of
        the day is then ``hour - 24 * day``, which equals ``hour mod 24`` exactly
        (the subtraction of two doubles within a factor of two of each other is
        exact; Sterbenz 1974) and costs less than the remainder.

    Examples
    --------
    >>> diurnal_multiplier(np.array([0.0, 6.0, 12.0]), 0.5).round(6).tolist()
    [0.5, 1.0, 1.5]
    >>> hours = np.array([0.25, 23.999, 24.0, 30.5, 671.9])
    >>> bool(np.array_equal(diurnal_multiplier(hours, 0.5, day=np.array([0, 0, 1, 1, 27])),
    ...                     diurnal_multiplier(hours, 0.5)))
    True
    """
    hours = np.asarray(hours, dtype=float)
    if amplitude == 0:
        return np.ones_like(hours)
    if day is None:
        of_day = np.mod(hours, 24.0)
    else:
        of_day = np.multiply(day, 24.0, dtype=float)
        np.subtract(hours, of_day, out=of_day)
    # 1 + a * sin(c * (hour of day - 6)), computed in place in that order.
    np.subtract(of_day, 6.0, out=of_day)
    np.multiply(of_day, _TWO_PI_24, out=of_day)
    np.sin(of_day, out=of_day)
    np.multiply(of_day, amplitude, out=of_day)
    np.add(of_day, 1.0, out=of_day)
    return of_day


def day_of_tick(calendar: Calendar) -> np.ndarray:
    """Return the day index of every tick, shape ``(n_ticks,)``."""
    return np.arange(calendar.n_ticks) * calendar.tick_hours // 24


def start_stock_calendar(env: simpy.Environment, pools: Pools, *,
                         review: Callable[[], object], deliver: Callable[[object], None]
                         ) -> simpy.Process:
    """Start the restock calendar of the pools in a simpy environment.

    This process is the one place that decides when stock changes: every
    ``restock_every_hours``, starting at hour 0, ``review()`` is called and
    returns the quantity ordered (up to each pool's level S); ``lead_time_hours``
    later ``deliver(quantity)`` is called (in the same step when the lead time
    is 0). Both callbacks see the time as ``env.now``. The engine passes
    callbacks that move the stock; :func:`stock_event_hours` passes callbacks
    that only note the times.

    Parameters
    ----------
    env : simpy.Environment
    pools : Pools
        ``restock_every_hours`` and ``lead_time_hours`` are used.
    review : callable, ``() -> quantity``
    deliver : callable, ``(quantity) -> None``

    Returns
    -------
    simpy.Process
        The review loop (it never ends; run the environment up to a time).
    """
    lead_time = pools.lead_time_hours

    def delivery(quantity: object):
        yield env.timeout(lead_time)
        deliver(quantity)

    def reviews():
        while True:
            quantity = review()
            if lead_time == 0:
                deliver(quantity)
            else:
                env.process(delivery(quantity))
            yield env.timeout(pools.restock_every_hours)

    return env.process(reviews())


def stock_event_hours(pools: Pools, horizon_hours: int) -> tuple[np.ndarray, np.ndarray]:
    """Return the review times and the delivery times of the restock policy, in hours.

    The times are those of :func:`start_stock_calendar`, read by running it
    without stock: a review every ``restock_every_hours`` from hour 0, a
    delivery ``lead_time_hours`` after each (at the review itself when the lead
    time is 0). Times at or after the horizon are left out.

    Examples
    --------
    >>> from spillgauge.scenario import Pools
    >>> reviews, deliveries = stock_event_hours(Pools(restock_every_hours=24,
    ...                                               lead_time_hours=6), 72)
    >>> reviews.tolist(), deliveries.tolist()
    ([0, 24, 48], [6, 30, 54])
    """
    env = simpy.Environment()
    reviews: list[float] = []
    deliveries: list[float] = []
    start_stock_calendar(env, pools, review=lambda: reviews.append(env.now),
                         deliver=lambda _: deliveries.append(env.now))
    env.run(until=horizon_hours)  # an event at the horizon itself is not run
    return (np.array(reviews, dtype=np.int64), np.array(deliveries, dtype=np.int64))


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


def trend_multiplier(hours: np.ndarray, trend_per_week: float) -> np.ndarray:
    """Return the market-wide growth multiplier ``(1 + g) ** (hour / 168)`` at each time.

    Parameters
    ----------
    hours : ndarray of float
        Times in hours since the start of the horizon.
    trend_per_week : float
        ``calendar.trend_per_week`` (g); 0 gives a flat 1.

    Examples
    --------
    >>> trend_multiplier(np.array([0.0, 168.0, 336.0]), 0.1).round(6).tolist()
    [1.0, 1.1, 1.21]
    """
    hours = np.asarray(hours, dtype=float)
    if trend_per_week == 0:
        return np.ones_like(hours)
    return np.power(1.0 + trend_per_week, hours / 168.0)


def _ar1(noise: np.ndarray, sd: float, rho: float) -> np.ndarray:
    """Stationary AR(1) paths along the last axis from standard normals."""
    state = np.empty_like(noise)
    state[..., 0] = sd * noise[..., 0]
    innovation = sd * np.sqrt(1.0 - rho * rho)
    for day in range(1, noise.shape[-1]):
        state[..., day] = rho * state[..., day - 1] + innovation * noise[..., day]
    return state


def draw_pool_shocks(pools: Pools, n_pools: int, days: int, *, rng: np.random.Generator
                     ) -> np.ndarray | None:
    """Draw each pool's own daily demand multiplier, shape ``(n_pools, days)``.

    The log multiplier of pool ``k`` on day ``d`` is the sum of

    - its own shock ``x_kd - s^2 / 2``: ``x_k`` a stationary AR(1) process with SD
      ``s = pools.shock_sd`` and autocorrelation ``pools.shock_autocorrelation``;
    - its loading on shared factors ``lambda_k . f_d - v_kd / 2``: ``factor_count``
      factors ``f_j``, each a Gaussian random walk whose daily steps have SD
      ``pools.factor_sd`` (``f_jd ~ N(0, (d + 1) factor_sd^2)``), loadings
      ``lambda_kj`` standard normal, drawn per replication, and
      ``v_kd = (d + 1) factor_sd^2 |lambda_k|^2`` the variance of
      ``lambda_k . f_d`` given the loadings.

    Given the loadings each multiplier has mean 1. The factors give the pools
    different trends (the interactive fixed-effects model of Abadie, Diamond &
    Hainmueller 2010), so parallel trends fail. Draws, in this order: the AR(1)
    normals ``(n_pools, days)``, the loadings ``(n_pools, factor_count)``, the
    factor steps ``(factor_count, days)``; nothing is drawn, and ``None`` returned,
    when both SDs are 0.

    >>> from spillgauge.scenario import Pools
    >>> draw_pool_shocks(Pools(), 3, 5, rng=np.random.default_rng(0)) is None
    True
    """
    check_rng(rng)
    if pools.shock_sd == 0 and pools.factor_sd == 0:
        return None
    log_multiplier = np.zeros((n_pools, days))
    sd, rho = pools.shock_sd, pools.shock_autocorrelation
    if sd > 0:
        log_multiplier += _ar1(rng.standard_normal((n_pools, days)), sd, rho) - sd * sd / 2.0
    if pools.factor_sd > 0:
        loadings = rng.standard_normal((n_pools, pools.factor_count))
        factors = np.cumsum(pools.factor_sd * rng.standard_normal((pools.factor_count, days)),
                            axis=1)
        variance = (np.arange(1, days + 1) * pools.factor_sd ** 2)[None, :] * \
            (loadings ** 2).sum(axis=1)[:, None]
        log_multiplier += loadings @ factors - variance / 2.0
    return np.exp(log_multiplier)
