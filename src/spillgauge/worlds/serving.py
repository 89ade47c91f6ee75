"""Serving every world's orders from stock, and tallying them, from the positions of its orders.

The live events are sorted by (segment, home pool, arrival), so a world's orders
of one pool in one segment (the hours between two stock events) are the
world's accepted events between two event indices: a *group*. A pool serves a
group's orders in arrival order while it has stock, so of a group's ``d``
orders, with stock ``L`` at the segment's start, the first ``min(d, L)`` are
served and the others lost. Once a world's accepted events are listed (one
pass over its events), each group's orders are counted by a binary search of
the group's bounds in that list, the segment loop runs on the (worlds x pools)
counts, and the lost orders are read off the tails of the groups that ran out:
the cost per world is one pass plus work in proportion to its lost orders,
where a running count per event costs several passes.

Each world's tallies (placed and fulfilled orders per bin: pool tick, user)
count whichever of its accepted or unaccepted events are fewer, against a
tally of all live events made once, and subtract its lost orders.
"""

from __future__ import annotations

import numpy as np

__all__ = ["group_starts", "lost_orders", "orders_per_group", "tally_worlds"]


def group_starts(pool: np.ndarray, segment_starts: np.ndarray, n_pools: int) -> np.ndarray:
    """Return the index of each (segment, pool) group's first event, shape ``(n_segments, n_pools + 1)``.

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


def orders_per_group(positions: np.ndarray, starts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return each group's number of earlier orders and its orders, each ``(n_segments, n_pools)``.

    ``positions`` lists one world's accepted events (sorted event indices); the
    group ``(s, p)`` holds the world's orders ``positions[before[s, p]:before[s, p] + orders[s, p]]``.
    """
    below = np.searchsorted(positions, starts.ravel()).reshape(starts.shape)
    return below[:, :-1], np.diff(below, axis=1)


def lost_orders(positions: np.ndarray, before: np.ndarray, orders: np.ndarray,
                served: np.ndarray) -> np.ndarray:
    """Return the events of one world's lost orders (sorted): each group's orders after its served ones.

    ``before`` and ``orders`` come from :func:`orders_per_group`; ``served`` is the
    number of each group's orders served (its first ones), same shape.

    Examples
    --------
    >>> lost_orders(np.array([1, 4, 5, 8, 9]), np.array([[0, 3]]), np.array([[3, 2]]),
    ...             np.array([[1, 2]])).tolist()
    [4, 5]
    """
    length = (orders - served).ravel()
    first = (before + served).ravel()
    keep = length > 0
    first, length = first[keep], length[keep]
    if not length.size:
        return positions[:0]
    # concatenated ranges first[k] : first[k] + length[k]
    offset = np.repeat(first - (np.cumsum(length) - length), length)
    offset += np.arange(offset.size)
    return positions[offset]


def tally_worlds(tallies: list[tuple[np.ndarray, int]], accepted: list[np.ndarray],
                 positions: list[np.ndarray], lost: list[np.ndarray]
                 ) -> list[tuple[np.ndarray, np.ndarray]]:
    """Return every world's placed and fulfilled orders per bin, each ``(n_worlds, n_bins)``.

    Parameters
    ----------
    tallies : list of (index, n_bins)
        ``index`` gives each live event's bin; one pair of tables is returned per pair.
    accepted : list of ndarray of bool, shape (n_events,)
        Each world's orders.
    positions : list of ndarray of int
        ``np.flatnonzero(accepted[w])``.
    lost : list of ndarray of int
        The events of each world's lost orders (a subset of its orders).

    Notes
    -----
    A world whose orders are most of the live events counts its other events and
    subtracts them from a tally of all live events (made once, and only when
    some world needs it); the counts are integers, so both ways give the same
    table.
    """
    n_worlds = len(accepted)
    tables = [(np.empty((n_worlds, n_bins), dtype=np.int64),
               np.empty((n_worlds, n_bins), dtype=np.int64)) for _, n_bins in tallies]
    everything = None
    for w in range(n_worlds):
        n = accepted[w].size
        counted = positions[w]
        if 2 * counted.size > n:
            counted = np.flatnonzero(~accepted[w])
            if everything is None:
                everything = [np.bincount(index, minlength=n_bins) for index, n_bins in tallies]
        for k, ((index, n_bins), (placed, done)) in enumerate(zip(tallies, tables)):
            counts = np.bincount(index[counted], minlength=n_bins)
            if counted is not positions[w]:
                np.subtract(everything[k], counts, out=counts)
            placed[w] = counts
            done[w] = counts - np.bincount(index[lost[w]], minlength=n_bins)
    return tables
