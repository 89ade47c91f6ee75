"""Thinning shared by the worlds of a replication: the events any world can keep, and each world's.

Every world keeps a candidate event when its uniform falls below the world's
acceptance probability ``base_accept * (1 + lift * d) * (1 + peer_lift * e)``
(thinning; Lewis & Shedler 1979), with the dose ``d`` and the exposure ``e`` in
[0, 1]. No world can keep an event whose uniform is at or above
``base_accept * max(1, 1 + lift) * max(1, 1 + peer_lift)``, so the worlds are
simulated on the other events only (:func:`live_events`): dropping events that
no world keeps changes no number, and a large share of the candidates goes.
When a world's doses are all 0 or 1 and peers do not count, its kept events are
one of two comparisons shared by every world (``uniform < base_accept`` and
``uniform < base_accept * (1 + lift)``), picked per event by whether the event's
user is treated at the event's tick (:func:`accepted_in_world`); otherwise the
world's probabilities are computed event by event.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from spillgauge.market.build import Market
from spillgauge.schedule import AssignmentSchedule
from spillgauge.worlds.treatment import (
    own_dose_of_events,
    peer_exposure_of_events,
    unit_dose,
)

__all__ = ["LiveEvents", "live_events", "accepted_in_world"]

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
    base_accept, uniform : ndarray of float, shape (n_live,)
    hour, substitute_uniform : ndarray of float, shape (n_live,), or None
    substitute_pool : ndarray of int, shape (n_live,), or None
    segment_bounds : ndarray of int, shape (n_segments + 1,)
    segment_starts : ndarray of int, shape (n_segments + 1,)
    kept_untreated : ndarray of bool, shape (n_live,)
        ``uniform < base_accept``: the events an untreated, unexposed user keeps.
    kept_treated : ndarray of bool, shape (n_live,)
        ``uniform < base_accept * (1 + lift)``: those a treated, unexposed user keeps.
    differ : ndarray of int, shape (n_differ,)
        The live events where ``kept_untreated`` and ``kept_treated`` differ: the
        only ones where a world of doses 0 and 1 without peers has to look up
        whether the event's user is treated.
    """

    user: np.ndarray
    pool: np.ndarray
    tick: np.ndarray
    base_accept: np.ndarray
    uniform: np.ndarray
    hour: np.ndarray | None
    substitute_uniform: np.ndarray | None
    substitute_pool: np.ndarray | None
    segment_bounds: np.ndarray
    segment_starts: np.ndarray
    kept_untreated: np.ndarray
    kept_treated: np.ndarray
    differ: np.ndarray

    @property
    def n_events(self) -> int:
        """Number of live events."""
        return int(self.user.size)


def _peer_counts(market: Market) -> bool:
    return market.scenario.effect.peer_lift != 0 and bool(market.adjacency.nnz)


def live_events(market: Market, events) -> LiveEvents:
    """Return the candidate events that some world may keep (``events``: ``CandidateEvents``)."""
    effect = market.scenario.effect
    bound = max(1.0, 1.0 + effect.lift) * _BOUND_MARGIN
    if _peer_counts(market):
        bound *= max(1.0, 1.0 + effect.peer_lift)
    index = np.flatnonzero(events.uniform < events.base_accept * bound)
    substitute = events.substitute_pool is not None
    base_accept, uniform = events.base_accept[index], events.uniform[index]
    return LiveEvents(
        user=events.user[index], pool=events.pool[index], tick=events.tick[index],
        base_accept=base_accept, uniform=uniform,
        hour=events.hour[index] if substitute else None,
        substitute_uniform=events.substitute_uniform[index] if substitute else None,
        substitute_pool=events.substitute_pool[index] if substitute else None,
        segment_bounds=events.segment_bounds,
        segment_starts=np.searchsorted(index, events.segment_starts),
        kept_untreated=(untreated := uniform < base_accept),
        kept_treated=(treated := uniform < base_accept * (1.0 + effect.lift)),
        differ=np.flatnonzero(untreated != treated))


def accepted_in_world(market: Market, live: LiveEvents, schedule: AssignmentSchedule
                      ) -> np.ndarray:
    """Return which live events become orders in a world, shape ``(n_live,)``.

    The probability is ``base_accept * (1 + lift * d) * (1 + peer_lift * e)``,
    computed in that order; with ``d`` in {0, 1} and no peer term it equals one
    of the two shared comparisons exactly (``1 + lift * 0 == 1``).
    """
    effect = market.scenario.effect
    calendar = market.scenario.calendar
    if schedule.n_users != market.n_users or schedule.n_ticks != calendar.n_ticks:
        raise ValueError("the schedule does not match the market (users or ticks differ)")
    if not schedule.is_treated.any():
        return live.kept_untreated
    dose = unit_dose(schedule, half_life_hours=effect.carryover_half_life_hours,
                     tick_hours=calendar.tick_hours)
    if not _peer_counts(market) and np.all((dose == 0.0) | (dose == 1.0)):
        treated = dose == 1.0
        if treated.all():
            return live.kept_treated
        differ = live.differ  # elsewhere both comparisons agree
        user = live.user[differ]
        if treated.shape[1] == 1:
            is_on = treated[:, 0][schedule.unit_of_user][user]
        else:
            is_on = treated.ravel()[schedule.unit_of_user[user] * treated.shape[1]
                                    + live.tick[differ]]
        accepted = live.kept_untreated.copy()
        accepted[differ] = np.where(is_on, live.kept_treated[differ], live.kept_untreated[differ])
        return accepted
    probability = live.base_accept * (1.0 + effect.lift * own_dose_of_events(
        dose, schedule.unit_of_user, live.user, live.tick))
    if _peer_counts(market):
        exposure = peer_exposure_of_events(market.adjacency, schedule.unit_of_user, dose,
                                           live.user, live.tick)
        probability = probability * (1.0 + effect.peer_lift * exposure)
    return live.uniform < probability
