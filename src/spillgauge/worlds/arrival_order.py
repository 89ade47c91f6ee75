"""The order in which a replication's candidate events are served: by segment, pool and arrival time.

The engine serves every segment (the hours between two stock events) pool by
pool in arrival order, so the candidates are put in the order (segment, home
pool, hour), and events of the same pool that arrive at exactly the same hour
keep the order in which they were drawn. Users are kept sorted by home pool
(``market.population``), so the candidates come out of the draw grouped by pool:
each pool's events are sorted by hour on their own (a sort of a few hundred
thousand numbers that stays in cache, where one sort of all the events does
not), and a stable sort by segment, of runs already in order, then puts the
segments first.
"""

from __future__ import annotations

import numpy as np

__all__ = ["arrival_order"]

# Pools with fewer events than this are sorted together with their neighbours (one call per
# batch instead of one per pool, for markets of many small pools).
_MIN_EVENTS_PER_SORT = 1 << 15


def _order_by_hour(hour: np.ndarray) -> np.ndarray:
    """Return the permutation that sorts one pool's events by hour, equal hours by index.

    The sort is of one integer per event: the hour scaled to the bits the
    event's index leaves free of 64, then the index. Hours that share their
    scaled value (closer than about ``max(hour) / 2**(64 - bits of n)``) are put
    in order by their exact hours afterwards, so the result is exact.
    """
    n = hour.size
    if n < 2:
        return np.arange(n)
    index_bits = (n - 1).bit_length()
    hour_bits = 64 - index_bits
    top = float(hour.max())
    scale = 2.0**hour_bits / top if top > 0 else np.inf
    if not np.isfinite(scale):  # all hours 0, or too close to 0 to scale
        return np.argsort(hour, kind="stable")
    key = np.multiply(hour, scale).astype(np.uint64)  # monotone in the hour (rounding and truncation keep order)
    np.minimum(key, np.uint64(2**hour_bits - 1), out=key)
    key <<= np.uint64(index_bits)
    key |= np.arange(n, dtype=np.uint64)
    key.sort()
    scaled = key >> np.uint64(index_bits)
    key &= np.uint64(2**index_bits - 1)
    order = key.view(np.int64)
    tied = scaled[1:] == scaled[:-1]  # in index order so far; put them in exact order
    if tied.any():
        in_run = np.zeros(n, dtype=bool)
        in_run[1:] |= tied
        in_run[:-1] |= tied
        at = np.flatnonzero(in_run)
        run = np.cumsum(np.concatenate(([True], ~tied)))[at]
        events = order[at]
        order[at] = events[np.lexsort((events, hour[events], run))]
    return order


def arrival_order(pool: np.ndarray, hour: np.ndarray, segment: np.ndarray, n_pools: int
                  ) -> np.ndarray:
    """Return the permutation that sorts events by (segment, pool, hour), then by index.

    Parameters
    ----------
    pool : ndarray of int, shape (n_events,)
        Home pool of each event, in ``[0, n_pools)``.
    hour : ndarray of float, shape (n_events,)
        Arrival time.
    segment : ndarray of int, shape (n_events,)
        Segment of each event; it must not decrease as ``hour`` grows (it is
        read from the event's tick).
    n_pools : int

    Returns
    -------
    ndarray of int64, shape (n_events,)
        ``order`` such that ``(segment[order], pool[order], hour[order])`` is in
        lexicographic order, ties (equal hours in one pool) in increasing index:
        the order of ``np.lexsort((np.arange(n), hour, pool, segment))``.

    Examples
    --------
    >>> arrival_order(np.array([1, 0, 0, 1]), np.array([5.0, 30.0, 2.0, 2.0]),
    ...               np.array([0, 1, 0, 0]), 2).tolist()
    [2, 3, 0, 1]
    """
    n = hour.size
    by_pool = None
    if n and np.any(pool[1:] < pool[:-1]):  # not grouped by pool: group them first
        by_pool = np.argsort(pool, kind="stable")
        pool, hour = pool[by_pool], hour[by_pool]
    starts = np.searchsorted(pool, np.arange(n_pools + 1))
    order = np.empty(n, dtype=np.int64)
    first = 0  # first pool of the batch being gathered
    for p in range(n_pools):
        lo, hi = starts[first], starts[p + 1]
        if hi - lo < _MIN_EVENTS_PER_SORT and p + 1 < n_pools:
            continue
        if first == p:
            local = _order_by_hour(hour[lo:hi])
        else:  # several small pools at once
            local = np.lexsort((hour[lo:hi], pool[lo:hi]))  # stable: equal hours by index
        np.add(local, lo, out=order[lo:hi])
        first = p + 1
    # Within a pool the segments now run in order: a stable sort by segment keeps the rest.
    order = order[np.argsort(segment[order] if by_pool is None else segment[by_pool][order],
                             kind="stable")]
    return order if by_pool is None else by_pool[order]
