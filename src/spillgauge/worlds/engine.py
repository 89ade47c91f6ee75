"""The engine: simulate the worlds of one replication on common random numbers.

Every world of a replication (all control, all treated, each design's) draws
its demand from the same candidate order events: a Poisson process per user at
the user's highest possible rate, with one uniform per event. A world keeps an
event when its uniform falls below the world's rate / the highest rate
(thinning; Lewis & Shedler 1979), so the worlds differ only where their rates
differ. Kept orders are served from their home pool's stock in arrival order;
within a tick that order is random. simpy holds the stock calendar (reviews,
deliveries after the lead time; ``calendar.start_stock_calendar``), and the
segments that group the order events are read from that same calendar
(``calendar.segment_bounds``); between two stock events the arithmetic is
vectorized numpy over all order events and all worlds at once, so the cost
grows with the number of order events, not with users x ticks. Each world is
held as the live events it does not keep (``worlds.thinning``), and its orders
are served from per-(segment, pool) counts (``worlds.serving``), so beyond the
passes shared by all worlds a world costs in proportion to the events where it
differs from the others and to its lost orders.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import simpy

from spillgauge.market.build import Market
from spillgauge.market.calendar import (
    day_of_tick,
    diurnal_multiplier,
    draw_daily_shocks,
    draw_pool_shocks,
    segment_bounds,
    start_stock_calendar,
    trend_multiplier,
)
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import POOL_SHOCKS, check_rng, side_stream
from spillgauge.worlds.arrival_order import arrival_order
from spillgauge.worlds.memory import keep_freed_memory
from spillgauge.worlds.outcome import outcome_tables, pre_period_outcome
from spillgauge.worlds.serving import (
    kept_mask,
    lost_orders,
    orders_per_group,
    tally_worlds,
)
from spillgauge.worlds.thinning import (
    LiveEvents,
    computes_probabilities,
    live_events,
    unkept_events,
)

__all__ = ["simulate_worlds", "CandidateEvents", "draw_candidates"]


@dataclass(frozen=True, eq=False, slots=True)
class CandidateEvents:
    """The candidate order events of one replication, shared by all its worlds.

    Events are sorted by (segment, home pool, arrival time).

    Attributes
    ----------
    user, pool, tick, day : ndarray of int, shape (n_events,)
    hour : ndarray of float, shape (n_events,)
        Arrival time in hours since the start.
    base_accept : ndarray of float, shape (n_events,)
        ``diurnal(hour) / peak``: the acceptance probability of an untreated,
        unexposed user.
    uniform : ndarray of float, shape (n_events,)
        The thinning uniform of each event.
    segment_bounds : ndarray of int, shape (n_segments + 1,)
        First tick of each segment (between two stock events), then ``n_ticks``.
    segment_starts : ndarray of int, shape (n_segments + 1,)
        Index of the first event of each segment, then ``n_events``.
    """

    user: np.ndarray
    pool: np.ndarray
    tick: np.ndarray
    day: np.ndarray
    hour: np.ndarray
    base_accept: np.ndarray
    uniform: np.ndarray
    segment_bounds: np.ndarray
    segment_starts: np.ndarray
    substitute_uniform: np.ndarray | None
    substitute_pool: np.ndarray | None

    @property
    def n_events(self) -> int:
        """Number of candidate events."""
        return int(self.user.size)


def _peak_factor(market: Market) -> float:
    """Bound every world's rate multiplier (peers count only when the graph has edges)."""
    effect = market.scenario.effect
    amplitude = market.scenario.calendar.diurnal_amplitude
    peer = max(1.0, 1.0 + effect.peer_lift) if market.adjacency.nnz else 1.0
    return (1.0 + amplitude) * max(1.0, 1.0 + effect.lift) * peer


def draw_candidates(market: Market, *, rng: np.random.Generator) -> CandidateEvents:
    """Draw the candidate order events of one replication.

    Each user gets ``Poisson(peak * rate_i * horizon_hours)`` candidates at
    uniform times, where ``peak`` bounds every world's rate multiplier
    (including the largest daily demand shock of the replication).
    """
    check_rng(rng)
    keep_freed_memory()  # the next replication reuses this one's pages (worlds/memory.py)
    scenario = market.scenario
    calendar, pools = scenario.calendar, scenario.pools
    population = market.population
    horizon = float(calendar.horizon_hours)
    shocks = draw_daily_shocks(calendar, rng=rng)
    pool_shocks = None
    if pools.shock_sd > 0 or pools.factor_sd > 0:
        pool_shocks = draw_pool_shocks(pools, population.n_pools, calendar.days,
                                       rng=side_stream(rng, POOL_SHOCKS))
    peak = _peak_factor(market) * float(shocks.max())
    if pool_shocks is not None:
        peak *= float(pool_shocks.max())
    trend = calendar.trend_per_week
    if trend > 0:
        peak *= float(trend_multiplier(np.array([horizon]), trend)[0])
    counts = rng.poisson(population.rate_per_hour * (peak * horizon))
    user = np.repeat(np.arange(population.n_users, dtype=np.int64), counts)
    hour = rng.random(user.size) * horizon
    substitute = pools.on_stockout == "substitute" and population.n_pools > 1
    bounds = segment_bounds(pools, calendar, every_tick=substitute)

    segment_of_tick = np.searchsorted(bounds, np.arange(calendar.n_ticks), side="right") - 1

    def tick_of(hour: np.ndarray) -> np.ndarray:
        # Hours are >= 0, so truncation is the floor: with one-hour ticks ``hour // 1``.
        tick = hour.astype(np.int64) if calendar.tick_hours == 1 else \
            (hour // calendar.tick_hours).astype(np.int64)
        return np.minimum(tick, calendar.n_ticks - 1, out=tick)

    # Users are sorted by pool, so repeating their pools is cheaper than looking them up.
    pool = np.repeat(population.pool_of_user, counts)
    order = arrival_order(pool, hour, segment_of_tick[tick_of(hour)], population.n_pools)
    del pool
    user, hour = user[order], hour[order]
    del order
    # Recomputing the small integer columns from the sorted events is cheaper than
    # permuting them.
    tick = tick_of(hour)
    pool = population.pool_of_user[user]
    uniform = rng.random(user.size)
    segment_starts = np.searchsorted(segment_of_tick[tick], np.arange(bounds.size))
    substitute_uniform = substitute_pool = None
    if substitute:
        substitute_uniform = rng.random(user.size)
        shift = 1 + np.floor(rng.random(user.size) * (population.n_pools - 1)).astype(np.int64)
        substitute_pool = (pool + shift) % population.n_pools
    day = day_of_tick(calendar)[tick]
    if trend != 0:
        multiplier = shocks[day]
        if pool_shocks is not None:
            multiplier = multiplier * pool_shocks[pool, day]
        multiplier = multiplier * trend_multiplier(hour, trend) / peak
    elif pool_shocks is not None:  # the same products, each taken once per pool and day
        multiplier = ((shocks[None, :] * pool_shocks) / peak)[pool, day]
    else:
        multiplier = (shocks / peak)[day]
    whole_days = day if calendar.tick_hours == 1 else None  # then day = floor(hour / 24)
    base_accept = diurnal_multiplier(hour, calendar.diurnal_amplitude, day=whole_days)
    base_accept *= multiplier
    return CandidateEvents(user=user, pool=pool, tick=tick, day=day, hour=hour,
                           base_accept=base_accept, uniform=uniform,
                           segment_bounds=bounds, segment_starts=segment_starts,
                           substitute_uniform=substitute_uniform,
                           substitute_pool=substitute_pool)


def _serve_in_order(accepted: np.ndarray, pools: np.ndarray, level: np.ndarray
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Serve accepted orders grouped by pool, in order, from each pool's stock level.

    Parameters
    ----------
    accepted : ndarray of bool, shape (n_worlds, n)
    pools : ndarray of int, shape (n,)
        Pool of each order; equal pools are contiguous.
    level : ndarray of int, shape (n_worlds, n_pools)
        Stock at the start; not modified.

    Returns
    -------
    served : ndarray of bool, shape (n_worlds, n)
    sold : ndarray of int, shape (n_worlds, n_pools)
    """
    n_worlds, n = accepted.shape
    if n == 0:
        return accepted.copy(), np.zeros_like(level)
    # An order is served when its rank among its pool's orders (running count minus the
    # count before the pool's first order) is within the pool's level: running <= threshold.
    running = np.cumsum(accepted, axis=1, dtype=np.int64)
    is_first = np.empty(n, dtype=bool)
    is_first[0] = True
    np.not_equal(pools[1:], pools[:-1], out=is_first[1:])
    first = np.flatnonzero(is_first)
    before = np.where(first > 0, running[:, np.maximum(first - 1, 0)], 0)  # (n_worlds, groups)
    group_pool = pools[first]
    threshold = before + level[:, group_pool]
    sizes = np.diff(np.append(first, n))
    served = accepted & (running <= np.repeat(threshold, sizes, axis=1))
    sold = np.zeros_like(level)
    demand = running[:, first + sizes - 1] - before
    sold[:, group_pool] = np.minimum(demand, level[:, group_pool])
    return served, sold


def simulate_worlds(market: Market, schedules: list[AssignmentSchedule], *,
                    rng: np.random.Generator, events: CandidateEvents | None = None,
                    user_days: bool = True) -> list[OutcomePanel]:
    """Simulate one world per schedule on the same candidate order events.

    Parameters
    ----------
    market : Market
    schedules : list of AssignmentSchedule
        One per world, e.g. all control, all treated and each design's draw.
    rng : numpy.random.Generator
        The replication's demand stream; every world shares its draws.
    events : CandidateEvents, optional
        Candidates already drawn with :func:`draw_candidates` (then ``rng`` is
        not used).
    user_days : bool, default True
        Keep each user's orders per day (``OutcomePanel.fulfilled``, ``demanded``);
        otherwise the panels hold per-user totals over the horizon only, which is
        all most designs need and much cheaper at scale. The numbers are the
        same either way.

    Returns
    -------
    list of OutcomePanel
        One per schedule, in order.
    """
    check_rng(rng)
    if events is None:
        events = draw_candidates(market, rng=rng)
    # the events no world keeps change no number
    events = live_events(market, events,
                         probabilities=computes_probabilities(market, schedules))
    scenario = market.scenario
    calendar, pools = scenario.calendar, scenario.pools
    population = market.population
    n_worlds, n_pools = len(schedules), population.n_pools
    unkept = [unkept_events(market, events, s) for s in schedules]  # the rest are orders
    accepted = [kept_mask(events.n_events, u.events) for u in unkept]
    substitute = events.substitute_pool is not None
    level = np.tile(population.order_up_to, (n_worlds, 1)).astype(np.int64)
    order_up_to = population.order_up_to
    bounds = events.segment_bounds
    n_segments = bounds.size - 1
    level_at_start = np.empty((n_segments, n_worlds, n_pools), dtype=np.int64)
    if substitute:  # lost orders move to other pools, so serving goes event by event
        stacked = np.stack(accepted) if n_worlds else np.zeros((0, events.n_events), bool)
        served = np.zeros_like(stacked)
        substituted = np.zeros_like(stacked)
    else:  # each world's orders per (segment, pool), served from the counts (worlds/serving.py)
        starts = events.group_starts
        groups = [orders_per_group(u.events, starts) for u in unkept]
        orders = np.stack([g[1] for g in groups]) if n_worlds else \
            np.zeros((0, n_segments, n_pools), dtype=np.int64)
        served_orders = np.empty_like(orders)
        substituted = None

    env = simpy.Environment()
    start_hour = 0

    def on_time() -> None:
        # The bounds come from the same calendar, so every stock event falls on a segment's
        # first tick; anything else would serve a segment from the wrong level.
        if env.now != start_hour:
            raise RuntimeError(f"stock event at hour {env.now} is not on a segment bound")

    def review() -> np.ndarray:
        on_time()
        return np.maximum(order_up_to[None, :] - level, 0)

    def deliver(quantity: np.ndarray) -> None:
        on_time()
        level[:] += quantity

    start_stock_calendar(env, pools, review=review, deliver=deliver)
    for s in range(n_segments):
        start_hour = bounds[s] * calendar.tick_hours
        while env.peek() <= start_hour:
            env.step()
        level_at_start[s] = level
        if not substitute:
            # the first min(orders, level) of a pool's orders are served (the level is >= 0)
            sold = np.minimum(orders[:, s], level, out=served_orders[:, s])
            level -= sold
            continue
        lo, hi = events.segment_starts[s], events.segment_starts[s + 1]
        if hi == lo:
            continue
        home = events.pool[lo:hi]
        done, sold = _serve_in_order(stacked[:, lo:hi], home, level)
        served[:, lo:hi] = done
        level -= sold
        _substitute(events, stacked, served, substituted, level, lo, hi, pools)
    if env.peek() < calendar.horizon_hours:  # a stock event after the last bound never ran
        raise RuntimeError(f"stock event at hour {env.peek()} is not on a segment bound")
    if substitute:
        fulfilled = list(served | substituted)
        lost = [np.flatnonzero(a & ~f) for a, f in zip(accepted, fulfilled)]
    else:
        lost = [lost_orders(u.events, a, starts, before, o, done) for u, a, (before, _), o, done
                in zip(unkept, accepted, groups, orders, served_orders)]
        fulfilled = None  # each world's mask, built only where a table needs it
        if user_days or scenario.study.outcome != "orders":
            fulfilled = [a.copy() for a in accepted]
            for f, gone in zip(fulfilled, lost):
                f[gone] = False
    pool_tick = events.pool * calendar.n_ticks + events.tick  # flat index of the pool tallies
    tallies = [(pool_tick, n_pools * calendar.n_ticks)]
    if not user_days:
        tallies.append((events.user, population.n_users))
    pool_counts, *rest = tally_worlds(tallies, unkept, lost, events.differ)
    user_counts = rest[0] if rest else None
    return [_panel(market, events, accepted[w], None if fulfilled is None else fulfilled[w],
                   None if substituted is None else substituted[w],
                   level_at_start[:, w, :], bounds, pool_tick=pool_tick,
                   pool_counts=(pool_counts[0][w], pool_counts[1][w]),
                   user_counts=None if user_days else (user_counts[0][w], user_counts[1][w]),
                   outcome=outcome_tables(
                       scenario.study.outcome, user=events.user, tick=events.tick,
                       pool=events.pool,
                       is_fulfilled=None if fulfilled is None else fulfilled[w],
                       basket_value=market.population.basket_value,
                       pool_of_user=population.pool_of_user, n_ticks=calendar.n_ticks,
                       day_of_tick=day_of_tick(calendar), keep_days=user_days))
            for w in range(n_worlds)]


def _substitute(events: LiveEvents, accepted: np.ndarray, served: np.ndarray,
                substituted: np.ndarray, level: np.ndarray, lo: int, hi: int, pools) -> None:
    """Send a share of one tick's lost orders to another pool, served from what it has left."""
    lost = accepted[:, lo:hi] & ~served[:, lo:hi]
    tries = lost & (events.substitute_uniform[lo:hi] < pools.substitute_share)
    if not tries.any():
        return
    target = events.substitute_pool[lo:hi]
    order = np.lexsort((events.hour[lo:hi], target))
    done, sold = _serve_in_order(tries[:, order], target[order], level)
    got = np.zeros_like(done)
    got[:, order] = done
    substituted[:, lo:hi] = got
    level -= sold


def _panel(market: Market, events: LiveEvents, accepted: np.ndarray,
           fulfilled: np.ndarray, substituted: np.ndarray | None, level_at_start: np.ndarray,
           bounds: np.ndarray, *, pool_tick: np.ndarray, pool_counts: tuple,
           user_counts: tuple | None, outcome: dict) -> OutcomePanel:
    """Return a world's panel; ``*_counts`` are its (placed, fulfilled) per pool tick and user,
    ``user_counts`` None to keep each user's orders per day instead; ``outcome`` holds the
    study's outcome tables (:func:`~spillgauge.worlds.outcome.outcome_tables`)."""
    calendar = market.scenario.calendar
    population = market.population
    n_users, n_pools, n_ticks = population.n_users, population.n_pools, calendar.n_ticks
    n_days = calendar.days

    def per_user_day(mask: np.ndarray) -> np.ndarray:
        user_day = events.user[mask] * n_days + day_of_tick(calendar)[events.tick[mask]]
        counts = np.bincount(user_day, minlength=n_users * n_days)
        return counts.astype(np.int32).reshape(n_users, n_days)

    def per_pool_tick(index: np.ndarray) -> np.ndarray:
        return np.bincount(index, minlength=n_pools * n_ticks).reshape(n_pools, n_ticks)

    pool_demanded, pool_fulfilled = (counts.reshape(n_pools, n_ticks) for counts in pool_counts)
    if substituted is not None and substituted.any():
        served_home = fulfilled & ~substituted
        sold = per_pool_tick(pool_tick[served_home])
        sold += per_pool_tick(events.substitute_pool[substituted] * n_ticks
                              + events.tick[substituted])
    else:
        sold = pool_fulfilled
    # stock after each tick: the segment's starting level less the sales so far in the segment
    running = np.cumsum(sold, axis=1)
    segment = np.repeat(np.arange(bounds.size - 1), np.diff(bounds))
    before = np.concatenate([np.zeros((n_pools, 1), dtype=running.dtype), running[:, :-1]],
                            axis=1)[:, bounds[:-1]]
    stock = level_at_start.T[:, segment] - (running - before[:, segment])
    if user_counts is None:
        users = {"fulfilled": per_user_day(fulfilled), "demanded": per_user_day(accepted)}
    else:
        users = {"fulfilled": None, "demanded": None, "fulfilled_total": user_counts[1],
                 "demanded_total": user_counts[0]}
    pre_outcome = pre_period_outcome(market.scenario.study.outcome, population.history,
                                     population.basket_value)
    return OutcomePanel(**users, pool_of_user=population.pool_of_user, history=population.history,
                        pre_outcome=pre_outcome,
                        pool_fulfilled=pool_fulfilled, pool_demanded=pool_demanded,
                        pool_lost=pool_demanded - pool_fulfilled, pool_stock=stock,
                        tick_hours=calendar.tick_hours, **outcome)
