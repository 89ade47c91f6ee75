"""Each vectorized kernel against an obvious slow loop (STYLE.md section 5), and graphs vs networkx."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from spillgauge.market.graph import (
    adjacency_from_edges,
    closed_neighbourhood_units,
    pool_block_adjacency,
    small_world_adjacency,
    to_networkx,
)
from spillgauge.market.population import estimate_rates
from spillgauge.schedule import AssignmentSchedule
from spillgauge.worlds.engine import _serve_in_order
from spillgauge.worlds.treatment import peer_exposure_of_events, unit_dose


def _random_schedule(rng, n_units=4, n_ticks=30):
    starts = np.sort(rng.choice(np.arange(1, n_ticks), size=5, replace=False))
    starts = np.concatenate([[0], starts])
    treated = rng.random((n_units, starts.size)) < 0.5
    return AssignmentSchedule(unit_of_user=rng.integers(0, n_units, size=12),
                              is_treated=treated, period_start_ticks=starts, n_ticks=n_ticks)


def test_unit_dose_matches_a_loop(rng):
    schedule = _random_schedule(rng)
    half_life, tick_hours = 3.0, 2
    fast = unit_dose(schedule, half_life_hours=half_life, tick_hours=tick_hours)
    table = schedule.unit_tick_treated()
    slow = np.zeros(table.shape)
    for u in range(table.shape[0]):
        last = None
        for t in range(table.shape[1]):
            if table[u, t]:
                slow[u, t], last = 1.0, t
            elif last is not None:
                slow[u, t] = 0.5 ** ((t - last) * tick_hours / half_life)
    np.testing.assert_allclose(fast, slow, rtol=1e-12)


def test_peer_exposure_matches_a_loop(rng):
    n = 12
    edges = rng.integers(0, n, size=(30, 2))
    adjacency = adjacency_from_edges(edges[:, 0], edges[:, 1], n)
    schedule = _random_schedule(rng)
    dose = unit_dose(schedule, half_life_hours=2.0, tick_hours=1)
    users = rng.integers(0, n, size=200)
    ticks = rng.integers(0, schedule.n_ticks, size=200)
    fast = peer_exposure_of_events(adjacency, schedule.unit_of_user, dose, users, ticks)
    dense = adjacency.toarray()
    slow = np.zeros(users.size)
    for e, (i, t) in enumerate(zip(users, ticks)):
        neighbours = np.flatnonzero(dense[i])
        if neighbours.size:
            slow[e] = np.mean([dose[schedule.unit_of_user[j], t] for j in neighbours])
    np.testing.assert_allclose(fast, slow, rtol=1e-12, atol=1e-15)


def test_serving_in_order_matches_a_loop(rng):
    pools = np.sort(rng.integers(0, 5, size=60))
    accepted = rng.random((3, 60)) < 0.6
    level = rng.integers(0, 8, size=(3, 5))
    served, sold = _serve_in_order(accepted, pools, level)
    for w in range(3):
        stock = level[w].copy()
        for k in range(60):
            ok = accepted[w, k] and stock[pools[k]] > 0
            assert served[w, k] == ok
            stock[pools[k]] -= ok
        np.testing.assert_array_equal(sold[w], level[w] - stock)


def test_closed_neighbourhood_units_match_networkx(rng):
    graph = nx.gnm_random_graph(40, 70, seed=3)
    adjacency = adjacency_from_edges(*np.array(graph.edges()).T, 40)
    labels = rng.integers(0, 6, size=40)
    fast = closed_neighbourhood_units(adjacency, labels, 6).toarray() > 0
    for i in graph.nodes:
        touched = {labels[j] for j in [i, *graph.neighbors(i)]}
        assert set(np.flatnonzero(fast[i])) == touched


def test_small_world_matches_networkx_statistics():
    # Watts & Strogatz (1998): our vectorized generator and networkx.watts_strogatz_graph
    # should agree on mean degree and average clustering (reference library, same n, k, p).
    ours = to_networkx(small_world_adjacency(4000, 10, 0.1, rng=np.random.default_rng(0)))
    theirs = nx.watts_strogatz_graph(4000, 10, 0.1, seed=0)
    degree = lambda g: 2 * g.number_of_edges() / g.number_of_nodes()  # noqa: E731
    assert degree(ours) == pytest.approx(degree(theirs), rel=0.01)
    assert nx.average_clustering(ours) == pytest.approx(nx.average_clustering(theirs), abs=0.02)


def test_pool_blocks_keep_the_within_pool_share():
    # Stochastic block model aligned with pools: a share w of edges is drawn inside the pool,
    # and a cross-market edge lands in the same pool with probability ~ 1/K.
    # (Pools of 500 users: repeated pairs and self-pairs, which are dropped, stay rare.)
    pools = np.repeat(np.arange(20), 500)
    adjacency = pool_block_adjacency(pools, 8, 0.8, rng=np.random.default_rng(1))
    coo = adjacency.tocoo()
    inside = np.mean(pools[coo.row] == pools[coo.col])
    assert inside == pytest.approx(0.8 + 0.2 / 20, abs=0.02)
    assert adjacency.sum() / 10000 == pytest.approx(8, rel=0.02)


def test_empirical_bayes_rates_by_hand():
    # Gamma-Poisson posterior mean (k + x) / (b + T) with moments k = m^2/(v - m),
    # b = k T / m (Morris 1983): counts 0, 2, 4 over T = 10 -> k = 2, b = 10.
    np.testing.assert_allclose(estimate_rates(np.array([0.0, 2.0, 4.0]), 10.0), [0.1, 0.2, 0.3])
    # No over-dispersion: everyone gets the pooled rate.
    np.testing.assert_allclose(estimate_rates(np.array([1.0, 1.0, 1.0]), 4.0), [0.25] * 3)


def test_posterior_rate_draws_keep_the_prior_spread():
    # Gamma-Poisson (Morris 1983): if r ~ Gamma(k, b) and x | r ~ Poisson(r T), a draw from
    # the posterior Gamma(k + x, b + T) is again distributed as the prior, so the drawn rates
    # have the prior's mean k/b and variance k/b^2 (posterior means would shrink it).
    from spillgauge.market.population import draw_rates

    rng = np.random.default_rng(5)
    k, b, hours = 2.0, 400.0, 28 * 24.0
    true = rng.gamma(k, 1 / b, size=200_000)
    counts = rng.poisson(true * hours).astype(float)
    drawn = draw_rates(counts, hours, rng=rng)
    assert drawn.mean() == pytest.approx(k / b, rel=0.01)
    assert drawn.var() == pytest.approx(k / b**2, rel=0.03)
    assert estimate_rates(counts, hours).var() < 0.9 * drawn.var()


def test_communities_are_cached_on_disk_and_recomputed_when_damaged(tmp_path, monkeypatch):
    import hashlib

    from spillgauge.market import build as market_module

    monkeypatch.setenv("SPILLGAUGE_CACHE", str(tmp_path))
    adjacency = small_world_adjacency(600, 6, 0.1, rng=np.random.default_rng(2))
    # A cache entry left by the Louvain version (its key: graph, resolution, seed, "v1")
    # holding a labelling that Leiden would not give: it must be ignored.
    digest = hashlib.sha256()
    for part in (adjacency.indptr, adjacency.indices):
        digest.update(np.ascontiguousarray(part, dtype=np.int64).tobytes())
    digest.update(f"{1.0!r}/{3}/v1".encode())
    np.save(tmp_path / f"communities-{digest.hexdigest()[:32]}.npy", np.zeros(600, np.int64))
    first = market_module._cached_communities(adjacency, resolution=1.0, seed=3)
    assert first.max() > 0
    files = list(tmp_path.glob("communities-leiden-*.npz"))
    assert len(files) == 1
    again = market_module._cached_communities(adjacency, resolution=1.0, seed=3)
    np.testing.assert_array_equal(first, again)
    # Damaged in three ways: not a file numpy can read, truncated, and well-formed but with
    # labels that do not match the digest stored beside them. Each is recomputed.
    good = files[0].read_bytes()
    for damaged in (b"not a numpy file", good[: len(good) // 2]):
        files[0].write_bytes(damaged)
        np.testing.assert_array_equal(
            market_module._cached_communities(adjacency, resolution=1.0, seed=3), first)
    with np.load(files[0]) as entry:
        parts = {name: entry[name] for name in entry.files}
    parts["labels"] = np.zeros(600, np.int64)
    np.savez(files[0], **parts)
    np.testing.assert_array_equal(
        market_module._cached_communities(adjacency, resolution=1.0, seed=3), first)
    other = market_module._cached_communities(adjacency, resolution=2.0, seed=3)
    assert len(list(tmp_path.glob("communities-leiden-*.npz"))) == 2
    assert other.max() >= first.max()
    monkeypatch.setenv("SPILLGAUGE_CACHE", "off")
    np.testing.assert_array_equal(
        market_module._cached_communities(adjacency, resolution=1.0, seed=3), first)
