"""Serving every world's orders from stock, and tallying them, from the events it does not keep.

The live events are sorted by (segment, home pool, arrival), so a world's orders
of one pool in one segment (the hours between two stock events) are the
world's orders among the events of an index range: a *group*. A pool serves a
group's orders in arrival order while it has stock, so of a group's ``d``
orders, with stock ``L`` at the segment's start, the first ``min(d, L)`` are
served and the others lost. A world is given by the sorted live events it does
not keep (``unkept``; with doses 0 and 1 a few of the events where the shared
comparisons differ): its orders before an event index are the index less the
unkept events before it (a binary search), so each group's orders are counted
from its bounds, the segment loop runs on the (worlds x pools) counts, and the
lost orders are read off the tails of the groups that ran out. The cost per
world grows with its unkept events and its lost orders, not with all its orders.

Each world's tallies (placed and fulfilled orders per bin: pool tick, user) are
a tally of all live events, made once, less its unkept events and its lost orders.
"""

from __future__ import annotations

import numpy as np

__all__ = ["group_starts", "kept_mask", "lost_orders", "orders_per_group", "tally_worlds"]


def group_starts(pool: np.ndarray, segment_starts: np.ndarray, n_pools: int) -> np.ndarray:
    """Return the first event of each (segment, pool) group, shape ``(n_segments, n_pools + 1)``.

    ``pool`` is sorted within each segment ``segment_starts[s]:segment_starts[s + 1]``;
    row ``s`` ends with the segment's end, so group ``(s, p)`` is
    ``starts[s, p]:starts[s, p + 1]`` (empty when the pool has no event).

    Examples
    --------
    >>> group_starts(np.array([0, 0, 2, 1, 1]), np.array([0, 3, 5]), 3).tolist()
    [[0, 2, 2, 3], [3, 3, 5, 5]]
    """
    n_segments = segment_starts.size - 1
    starts = np.empty((n_segments, n_pools + 1), dtype=np.int64)
    bins = np.arange(n_pools + 1)
    for s in range(n_segments):
        lo, hi = segment_starts[s], segment_starts[s + 1]
        starts[s] = lo + np.searchsorted(pool[lo:hi], bins)
    return starts


def kept_mask(n_events: int, unkept: np.ndarray) -> np.ndarray:
    """Return which of ``n_events`` live events a world keeps, from the ones it does not."""
    kept = np.ones(n_events, dtype=bool)
    kept[unkept] = False
    return kept


def orders_per_group(unkept: np.ndarray, starts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return each group's number of earlier orders and its orders, each ``(n_segments, n_pools)``.

    ``unkept`` lists the live events one world does not keep (sorted); ``starts``
    comes from :func:`group_starts`. The world's orders before event ``i`` are
    ``i`` less its unkept events before ``i``.

    Examples
    --------
    Events 0-2 are pool 0's, 3-4 pool 1's; the world does not keep events 1 and 3:

    >>> before, orders = orders_per_group(np.array([1, 3]), np.array([[0, 3, 5]]))
    >>> before.tolist(), orders.tolist()
    ([[0, 2]], [[2, 1]])
    """
    below = starts - np.searchsorted(unkept, starts.ravel()).reshape(starts.shape)
    return below[:, :-1], np.diff(below, axis=1)


def lost_orders(unkept: np.ndarray, kept: np.ndarray, starts: np.ndarray, before: np.ndarray,
                orders: np.ndarray, served: np.ndarray) -> np.ndarray:
    """Return the events of one world's lost orders (sorted): each group's orders after the served.

    Parameters
    ----------
    unkept : ndarray of int
        The live events the world does not keep (sorted).
    kept : ndarray of bool, shape (n_events,)
        ``kept_mask(n_events, unkept)``.
    starts : ndarray of int, shape (n_segments, n_pools + 1)
        From :func:`group_starts`.
    before, orders : ndarray of int, shape (n_segments, n_pools)
        From :func:`orders_per_group`.
    served : ndarray of int, shape (n_segments, n_pools)
        How many of each group's orders were served (its first ones).

    Notes
    -----
    The world's order of rank ``r`` (counted from 0 over all its orders) is
    event ``r + k``, where ``k`` counts the unkept events ``u_j`` (j-th, from 0)
    with ``u_j - j <= r``: ``u_j - j`` orders come before ``u_j``, a nondecreasing
    sequence, so ``k`` is one binary search. A group's lost orders are its kept
    events from its first lost order to its end.

    Examples
    --------
    Events 0-4 are one group; the world does not keep event 1, so its orders are
    events 0, 2, 3, 4; with two served, events 3 and 4 are lost:

    >>> unkept = np.array([1])
    >>> lost_orders(unkept, kept_mask(5, unkept), np.array([[0, 5]]), np.array([[0]]),
    ...             np.array([[4]]), np.array([[2]])).tolist()
    [3, 4]
    """
    short = np.flatnonzero((orders > served).ravel())
    if not short.size:
        return np.zeros(0, dtype=np.int64)
    rank = (before + served).ravel()[short]
    first = rank + np.searchsorted(unkept - np.arange(unkept.size), rank, side="right")
    length = starts[:, 1:].ravel()[short] - first
    # the events first[k] : first[k] + length[k], concatenated
    event = np.repeat(first - (np.cumsum(length) - length), length)
    event += np.arange(event.size)
    return event.take(np.flatnonzero(kept.take(event)))


def tally_worlds(tallies: list[tuple[np.ndarray, int]], unkept: list, lost: list[np.ndarray],
                 differ: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
    """Return every world's placed and fulfilled orders per bin, each ``(n_worlds, n_bins)``.

    Parameters
    ----------
    tallies : list of (index, n_bins)
        ``index`` gives each live event's bin; one pair of tables is returned per pair.
    unkept : list of Unkept
        The live events each world does not keep (``worlds.thinning.unkept_events``).
    lost : list of ndarray of int
        The events of each world's lost orders.
    differ : ndarray of int
        ``LiveEvents.differ``; a world's unkept events given by their place in it
        take their bins from the bins of ``differ``, a short array.

    Notes
    -----
    A world's placed orders per bin are the tally of all live events (made once)
    less the tally of its unkept events; counts are integers, so this equals
    counting its orders.
    """
    n_worlds = len(unkept)
    tables = [(np.empty((n_worlds, n_bins), dtype=np.int64),
               np.empty((n_worlds, n_bins), dtype=np.int64)) for _, n_bins in tallies]
    if not n_worlds:
        return tables
    everything = [np.bincount(index, minlength=n_bins) for index, n_bins in tallies]
    on_differ = [index.take(differ) for index, _ in tallies] \
        if any(u.in_differ is not None for u in unkept) else None
    for w, (events, in_differ) in enumerate(unkept):
        for k, ((index, n_bins), (placed, done)) in enumerate(zip(tallies, tables)):
            dropped = index.take(events) if in_differ is None else on_differ[k].take(in_differ)
            np.subtract(everything[k], np.bincount(dropped, minlength=n_bins), out=placed[w])
            np.subtract(placed[w], np.bincount(index.take(lost[w]), minlength=n_bins),
                        out=done[w])
    return tables
