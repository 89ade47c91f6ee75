"""Thinning shared by the worlds of a replication: the events any world can keep, and each world's.

Every world keeps a candidate event when its uniform falls below the world's
acceptance probability ``base_accept * (1 + lift * d) * (1 + peer_lift * e)``
(thinning; Lewis & Shedler 1979), with the dose ``d`` and the exposure ``e`` in
[0, 1]. No world can keep an event whose uniform is at or above
``base_accept * max(1, 1 + lift) * max(1, 1 + peer_lift)`` (the last factor
only when peers count), so the worlds are
simulated on the other events only (:func:`live_events`): dropping events that
no world keeps changes no number, and a large share of the candidates goes.
When a world's doses are all 0 or 1 and peers do not count, its kept events are
one of two comparisons shared by every world (``uniform < base_accept`` and
``uniform < base_accept * (1 + lift)``), picked per event by whether the event's
user is treated at the event's tick; otherwise the world's probabilities are
computed event by event. A world is described by the live events it does *not*
keep (:func:`unkept_events`): with doses 0 and 1 they are a part of the events
where the two comparisons differ, far fewer than its orders.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from spillgauge.market.build import Market
from spillgauge.schedule import AssignmentSchedule
from spillgauge.worlds.serving import group_starts
from spillgauge.worlds.treatment import (
    own_dose_of_events,
    peer_exposure_of_events,
    unit_dose,
)

__all__ = ["LiveEvents", "Unkept", "computes_probabilities", "live_events", "unkept_events"]

# Head room on the bound of every world's acceptance probability, far above the rounding of
# the two products that make a world's probability (a few units of 2**-53).
_BOUND_MARGIN = 1.0 + 2.0**-30


@dataclass(frozen=True, eq=False, slots=True)
class LiveEvents:
    """The candidate events that some world of the replication may keep, in the candidates' order.

    The arrays are the candidates' own (``CandidateEvents``), restricted to the
    live events; ``segment_starts`` indexes the live events. ``hour`` and the
    substitution arrays are None unless stock-outs substitute.

    Attributes
    ----------
    user, pool, tick : ndarray of int, shape (n_live,)
    hour, substitute_uniform : ndarray of float, shape (n_live,), or None
    substitute_pool : ndarray of int, shape (n_live,), or None
    segment_bounds : ndarray of int, shape (n_segments + 1,)
    segment_starts : ndarray of int, shape (n_segments + 1,)
    group_starts : ndarray of int, shape (n_segments, n_pools + 1)
        The first live event of each pool in each segment, then the segment's end
        (``worlds.serving.group_starts``).
    kept_untreated : ndarray of bool, shape (n_live,)
        ``uniform < base_accept``: the events an untreated, unexposed user keeps.
    differ : ndarray of int, shape (n_differ,)
        The live events where ``kept_untreated`` and ``uniform < base_accept * (1 +
        lift)`` (what a treated, unexposed user keeps) differ: the only ones where a
        world of doses 0 and 1 without peers has to look up whether the event's
        user is treated.
    differ_user, differ_tick : ndarray of int, shape (n_differ,)
        ``user[differ]`` and ``tick[differ]``.
    base_accept, uniform : ndarray of float, shape (n_live,), or None
        Kept only when a world's probabilities are computed event by event
        (:func:`computes_probabilities`).
    """

    user: np.ndarray
    pool: np.ndarray
    tick: np.ndarray
    base_accept: np.ndarray | None
    uniform: np.ndarray | None
    hour: np.ndarray | None
    substitute_uniform: np.ndarray | None
    substitute_pool: np.ndarray | None
    segment_bounds: np.ndarray
    segment_starts: np.ndarray
    group_starts: np.ndarray
    kept_untreated: np.ndarray
    differ: np.ndarray
    differ_user: np.ndarray
    differ_tick: np.ndarray

    @property
    def n_events(self) -> int:
        """Number of live events."""
        return int(self.user.size)


def _peer_counts(market: Market) -> bool:
    return market.scenario.effect.peer_lift != 0 and bool(market.adjacency.nnz)


def computes_probabilities(market: Market, schedules: list[AssignmentSchedule]) -> bool:
    """Whether some world's probabilities are computed event by event: peers count, or doses
    between 0 and 1 (carryover after a unit leaves treatment) may occur."""
    half_life = market.scenario.effect.carryover_half_life_hours
    return _peer_counts(market) or any(not s.is_static and half_life > 0 for s in schedules)


def live_events(market: Market, events, *, probabilities: bool = True) -> LiveEvents:
    """Return the candidate events that some world may keep (``events``: ``CandidateEvents``).

    ``probabilities``: keep each live event's ``base_accept`` and ``uniform``
    (needed when :func:`computes_probabilities`).

    Without peers every world's probability lies between ``base_accept`` and
    ``base_accept * (1 + lift)`` in floating point too (``1 + lift * d`` is
    monotone in ``d`` and rounds to ``1 + lift`` at ``d = 1``), so the live events
    are exactly those that one of the two shared comparisons keeps; with peers
    the bound has head room for the rounding of two products.
    """
    effect = market.scenario.effect
    uniform, base_accept = events.uniform, events.base_accept
    bound = max(1.0, 1.0 + effect.lift)
    if _peer_counts(market):
        bound *= max(1.0, 1.0 + effect.peer_lift) * _BOUND_MARGIN
    live = uniform < base_accept * bound
    # the two shared comparisons, over the candidates (cheaper than gathering their operands)
    untreated = live if bound == 1.0 else uniform < base_accept
    treated = live if bound == 1.0 + effect.lift else uniform < base_accept * (1.0 + effect.lift)
    index = np.flatnonzero(live)
    substitute = events.substitute_pool is not None
    user, tick = events.user.take(index), events.tick.take(index)
    # each (segment, pool) group of the candidates, and so of the live events, is one pool's
    n_pools = market.population.n_pools
    starts = np.searchsorted(index, group_starts(events.pool, events.segment_starts, n_pools))
    pool = np.repeat(np.tile(np.arange(n_pools), starts.shape[0]), np.diff(starts, axis=1).ravel())
    if treated is live:  # every live event is kept by the treated comparison
        untreated = untreated.take(index)
        differ = np.flatnonzero(~untreated)
    elif untreated is live:
        differ = np.flatnonzero(~treated.take(index))
        untreated = np.ones(index.size, dtype=bool)
    else:
        untreated = untreated.take(index)
        differ = np.flatnonzero(untreated != treated.take(index))
    return LiveEvents(
        user=user, pool=pool, tick=tick,
        base_accept=base_accept.take(index) if probabilities else None,
        uniform=uniform.take(index) if probabilities else None,
        hour=events.hour[index] if substitute else None,
        substitute_uniform=events.substitute_uniform[index] if substitute else None,
        substitute_pool=events.substitute_pool[index] if substitute else None,
        segment_bounds=events.segment_bounds,
        segment_starts=np.searchsorted(index, events.segment_starts), group_starts=starts,
        kept_untreated=untreated, differ=differ,
        differ_user=user.take(differ), differ_tick=tick.take(differ))


class Unkept(NamedTuple):
    """The live events a world does not keep (sorted), and where they are in ``differ``.

    ``in_differ`` is None when the world's probabilities were computed event by
    event; otherwise ``events == live.differ[in_differ]``.
    """

    events: np.ndarray
    in_differ: np.ndarray | None


def _all_or_none_of_differ(live: LiveEvents, every: bool) -> Unkept:
    if every:
        return Unkept(live.differ, np.arange(live.differ.size))
    return Unkept(live.differ[:0], np.arange(0))


def unkept_events(market: Market, live: LiveEvents, schedule: AssignmentSchedule) -> Unkept:
    """Return the live events that do not become orders in a world.

    The probability is ``base_accept * (1 + lift * d) * (1 + peer_lift * e)``,
    computed in that order; with ``d`` in {0, 1} and no peer term it equals one
    of the two shared comparisons exactly (``1 + lift * 0 == 1``), and every
    live event is kept by one of them (:func:`live_events`), so the world drops
    only events of ``differ``: those of treated users when the lift is negative,
    of untreated users otherwise.
    """
    effect = market.scenario.effect
    calendar = market.scenario.calendar
    if schedule.n_users != market.n_users or schedule.n_ticks != calendar.n_ticks:
        raise ValueError("the schedule does not match the market (users or ticks differ)")
    peers = _peer_counts(market)
    if not schedule.is_treated.any():  # doses 0: every event of ``differ`` or none is dropped
        if peers:
            return Unkept(np.flatnonzero(~live.kept_untreated), None)
        return _all_or_none_of_differ(live, effect.lift > 0)
    if schedule.is_static:  # doses 0 and 1 (``unit_dose``)
        dose, treated = None, schedule.is_treated
    else:
        dose = unit_dose(schedule, half_life_hours=effect.carryover_half_life_hours,
                         tick_hours=calendar.tick_hours)
        treated = dose == 1.0 if np.all((dose == 0.0) | (dose == 1.0)) else None
    if not peers and treated is not None:
        if treated.all():  # doses 1: the other way round
            return _all_or_none_of_differ(live, effect.lift < 0)
        if treated.shape[1] == 1:
            is_on = treated[:, 0][schedule.unit_of_user].take(live.differ_user)
        else:
            is_on = treated.ravel().take(schedule.unit_of_user.take(live.differ_user)
                                         * treated.shape[1] + live.differ_tick)
        # on ``differ`` the treated comparison keeps the event iff the lift is positive
        in_differ = np.flatnonzero(~is_on if effect.lift > 0 else is_on)
        return Unkept(live.differ.take(in_differ), in_differ)
    if live.uniform is None:
        raise ValueError("these live events were taken without the probabilities' operands")
    if dose is None:
        dose = schedule.is_treated.astype(float)
    probability = live.base_accept * (1.0 + effect.lift * own_dose_of_events(
        dose, schedule.unit_of_user, live.user, live.tick))
    if peers:
        exposure = peer_exposure_of_events(market.adjacency, schedule.unit_of_user, dose,
                                           live.user, live.tick)
        probability = probability * (1.0 + effect.peer_lift * exposure)
    return Unkept(np.flatnonzero(~(live.uniform < probability)), None)
