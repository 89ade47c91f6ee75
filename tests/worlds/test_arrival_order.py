"""The candidates' serving order against numpy's lexsort, the plain statement of the rule.

The rule: by segment, then home pool, then arrival hour, then the order of the
draw. ``np.lexsort((np.arange(n), hour, pool, segment))`` states it directly
(numpy's documented lexicographic, stable sort), so the pool-by-pool sort with
its packed integer keys must give the same permutation, including where hours
are equal or closer than the packed keys can tell apart.
"""

from __future__ import annotations

import numpy as np
import pytest

from spillgauge.worlds.arrival_order import _order_by_hour, arrival_order


def _hours(kind: str, n: int, rng: np.random.Generator) -> np.ndarray:
    if kind == "uniform":
        return rng.random(n) * 672.0
    if kind == "equal":  # many hours exactly equal
        return np.round(rng.random(n) * 50.0, 1)
    if kind == "close":  # distinct hours closer than the packed key's resolution
        return 100.0 + rng.integers(0, 30, n) * 1e-13
    return np.where(rng.random(n) < 0.5, 0.0, rng.random(n) * 1e-300)  # "tiny": cannot scale


@pytest.mark.parametrize("kind", ["uniform", "equal", "close", "tiny"])
def test_one_pool_sorts_as_lexsort(kind):
    rng = np.random.default_rng(20261203)
    for n in (0, 1, 2, 17, 2500):
        hour = _hours(kind, n, rng)
        np.testing.assert_array_equal(_order_by_hour(hour), np.lexsort((np.arange(n), hour)))


@pytest.mark.parametrize("kind", ["uniform", "equal", "close"])
@pytest.mark.parametrize("grouped", [True, False])
def test_arrival_order_is_lexsort_by_segment_pool_hour_index(kind, grouped):
    rng = np.random.default_rng(7)
    for n_pools, n in ((1, 3000), (5, 4000), (40, 900)):
        hour = _hours(kind, n, rng)
        pool = rng.integers(0, n_pools, n)
        if grouped:  # as the draw gives them: users, hence events, sorted by pool
            pool = np.sort(pool)
        segment = (hour // 24).astype(np.int64)
        expected = np.lexsort((np.arange(n), hour, pool, segment))
        np.testing.assert_array_equal(arrival_order(pool, hour, segment, n_pools), expected)


def test_small_pools_are_sorted_in_batches(monkeypatch):
    # Pools below the batch size share one lexsort; the result must not change.
    from spillgauge.worlds import arrival_order as module

    rng = np.random.default_rng(3)
    n, n_pools = 5000, 300
    hour, pool = rng.random(n) * 48.0, np.sort(rng.integers(0, n_pools, n))
    segment = (hour // 6).astype(np.int64)
    expected = np.lexsort((np.arange(n), hour, pool, segment))
    for batch in (1, 64, 1 << 20):
        monkeypatch.setattr(module, "_MIN_EVENTS_PER_SORT", batch)
        np.testing.assert_array_equal(arrival_order(pool, hour, segment, n_pools), expected)
