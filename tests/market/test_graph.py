"""Community detection (igraph's Leiden) against networkx's Louvain and planted communities."""

from __future__ import annotations

import random

import igraph
import networkx as nx
import numpy as np
import pytest
from scipy import sparse

from spillgauge.market.graph import (
    adjacency_from_edges,
    detect_communities,
    pool_block_adjacency,
    to_igraph,
    to_networkx,
)

# Tolerance on modularity against networkx's Louvain (common practice, no source): the
# two methods optimise the same objective and Leiden never does worse than Louvain on
# such graphs in Traag, Waltman & van Eck (2019), Sci. Rep. 9:5233, Fig. 4; 0.01 leaves
# room for either one's random node order.
MODULARITY_TOLERANCE = 0.01


def _adjacency_of(graph: nx.Graph) -> sparse.csr_array:
    edges = np.array(list(graph.edges()), dtype=np.int64).reshape(-1, 2)
    return adjacency_from_edges(edges[:, 0], edges[:, 1], graph.number_of_nodes())


def _planted_blocks(graph: nx.Graph) -> np.ndarray:
    labels = np.empty(graph.number_of_nodes(), dtype=np.int64)
    for block, members in enumerate(graph.graph["partition"]):
        labels[list(members)] = block
    return labels


def _partition(labels: np.ndarray) -> list[set[int]]:
    return [set(np.flatnonzero(labels == c).tolist()) for c in np.unique(labels)]


def _adjusted_rand_index(a: np.ndarray, b: np.ndarray) -> float:
    return igraph.compare_communities(a.tolist(), b.tolist(), method="adjusted_rand")


def test_adjusted_rand_index_by_hand():
    # Hubert & Arabie (1985), J. Classif. 2:193-218, ARI = (I - E) / (M - E) with
    # I = sum C(n_ij, 2), E = sum C(a_i, 2) sum C(b_j, 2) / C(n, 2), M = (sum C(a_i, 2)
    # + sum C(b_j, 2)) / 2. Worked on paper for truth [0,0,0,1,1,1], found [0,0,1,1,2,2]:
    # I = 1 + 1 = 2, row term 3 + 3 = 6, column term 1 + 1 + 1 = 3, C(6, 2) = 15,
    # E = 6 * 3 / 15 = 1.2, M = 4.5: ARI = 0.8 / 3.3.
    truth, found = np.array([0, 0, 0, 1, 1, 1]), np.array([0, 0, 1, 1, 2, 2])
    assert _adjusted_rand_index(truth, found) == pytest.approx(0.8 / 3.3)
    assert _adjusted_rand_index(truth, truth) == pytest.approx(1.0)


@pytest.mark.parametrize("case", ["planted_partition", "sbm_unequal", "sbm_weak"])
def test_leiden_matches_louvain_modularity_and_recovers_planted_blocks(case):
    # Reference: networkx's louvain_communities (Blondel et al. 2008) on networkx's
    # generators with planted communities; modularity from networkx.community.modularity
    # (Newman & Girvan 2004), recovery from the adjusted Rand index (Hubert & Arabie 1985).
    if case == "planted_partition":
        # 20 blocks of 50, expected degree 49 * 0.3 + 950 * 0.005 = 19.45, 75% inside.
        graph = nx.planted_partition_graph(20, 50, 0.3, 0.005, seed=1)
        min_ari = 0.99
    elif case == "sbm_unequal":
        sizes = [40, 60, 80, 100, 120, 150, 200, 250]
        probs = np.full((8, 8), 0.002) + np.diag(np.full(8, 0.15))
        graph = nx.stochastic_block_model(sizes, probs.tolist(), seed=2)
        min_ari = 0.95
    else:
        # Weaker structure: about half of each user's edges leave the block.
        graph = nx.planted_partition_graph(10, 100, 0.08, 0.009, seed=3)
        min_ari = 0.8
    adjacency = _adjacency_of(graph)
    truth = _planted_blocks(graph)
    leiden = detect_communities(adjacency, rng=np.random.default_rng(4))
    louvain = nx.community.louvain_communities(to_networkx(adjacency), seed=4)
    q_leiden = nx.community.modularity(graph, _partition(leiden))
    q_louvain = nx.community.modularity(graph, louvain)
    assert q_leiden >= q_louvain - MODULARITY_TOLERANCE
    assert _adjusted_rand_index(leiden, truth) >= min_ari
    louvain_labels = np.empty_like(truth)
    for label, members in enumerate(louvain):
        louvain_labels[list(members)] = label
    # Louvain on the same graph recovers the blocks as well, so the bar is not ours alone.
    assert _adjusted_rand_index(louvain_labels, truth) >= min_ari


def test_resolution_means_what_it_means_in_networkx():
    # At resolution 2, networkx's modularity with resolution=2 (Reichardt & Bornholdt 2006)
    # of Leiden's partition is within tolerance of Louvain's at the same resolution, and the
    # partition is finer than at resolution 1.
    graph = nx.planted_partition_graph(12, 60, 0.2, 0.01, seed=5)
    adjacency = _adjacency_of(graph)
    fine = detect_communities(adjacency, resolution=2.0, rng=np.random.default_rng(6))
    coarse = detect_communities(adjacency, resolution=0.2, rng=np.random.default_rng(6))
    louvain = nx.community.louvain_communities(graph, resolution=2.0, seed=6)
    q_fine = nx.community.modularity(graph, _partition(fine), resolution=2.0)
    assert q_fine >= nx.community.modularity(graph, louvain, resolution=2.0) \
        - MODULARITY_TOLERANCE
    assert fine.max() > coarse.max()


def test_pool_aligned_graph_recovers_its_pools():
    # The market's own generator: 30 pools of 200 users, 90% of edges inside. Modularity of
    # the planted pools is about 0.9 - 1/30 (Newman 2006: Q = e_in - sum a_c^2 with equal
    # blocks); Leiden finds the pools (ARI against the planted labels).
    pools = np.repeat(np.arange(30), 200)
    adjacency = pool_block_adjacency(pools, 8, 0.9, rng=np.random.default_rng(7))
    labels = detect_communities(adjacency, rng=np.random.default_rng(8))
    assert _adjusted_rand_index(labels, pools) >= 0.95
    graph = to_networkx(adjacency)
    q_louvain = nx.community.modularity(graph, nx.community.louvain_communities(graph, seed=8))
    assert nx.community.modularity(graph, _partition(labels)) >= q_louvain - MODULARITY_TOLERANCE


def test_to_igraph_keeps_every_edge_once():
    # igraph's modularity of a partition equals networkx's on the same graph (same edges).
    adjacency = pool_block_adjacency(np.repeat(np.arange(5), 40), 6, 0.8,
                                     rng=np.random.default_rng(9))
    graph = to_igraph(adjacency)
    assert graph.vcount() == 200 and not graph.is_directed()
    assert graph.ecount() == adjacency.nnz // 2
    ours = sparse.csr_array(graph.get_adjacency_sparse())
    assert (ours != adjacency).nnz == 0
    blocks = np.repeat(np.arange(5), 40)
    assert graph.modularity(blocks.tolist()) == pytest.approx(
        nx.community.modularity(to_networkx(adjacency), _partition(blocks)))


def test_labels_are_deterministic_canonical_and_ignore_global_random_state():
    graph = nx.planted_partition_graph(8, 40, 0.25, 0.02, seed=10)
    adjacency = _adjacency_of(graph)
    random.seed(1)
    np.random.seed(1)  # noqa: NPY002 (global state that must not matter)
    first = detect_communities(adjacency, rng=np.random.default_rng(11))
    random.seed(2)
    np.random.seed(2)  # noqa: NPY002
    again = detect_communities(adjacency, rng=np.random.default_rng(11))
    np.testing.assert_array_equal(first, again)
    # Numbered 0..k-1 by each community's smallest user.
    _, first_member = np.unique(first, return_index=True)
    assert np.all(np.diff(first_member) > 0) and first[0] == 0
    # The generator's state is what drives igraph: a used generator gives another draw of
    # the random node order, yet the same planted blocks.
    rng = np.random.default_rng(11)
    rng.random(1000)
    other = detect_communities(adjacency, rng=rng)
    assert _adjusted_rand_index(other, _planted_blocks(graph)) >= 0.95


def test_igraph_random_source_is_put_back():
    # After a call, igraph draws from Python's random module again (its documented default):
    # the same random.seed gives the same igraph result before and after.
    graph = igraph.Graph.Erdos_Renyi(n=200, m=600)
    random.seed(12)
    before = graph.community_leiden(objective_function="modularity").membership
    detect_communities(adjacency_from_edges(np.array([0]), np.array([1]), 3),
                       rng=np.random.default_rng(0))
    random.seed(12)
    after = graph.community_leiden(objective_function="modularity").membership
    assert before == after


def test_isolated_users_are_their_own_communities_and_rng_is_checked():
    adjacency = adjacency_from_edges(np.array([0, 1, 3]), np.array([1, 2, 4]), 7)
    labels = detect_communities(adjacency, rng=np.random.default_rng(0))
    assert labels.tolist() == [0, 0, 0, 1, 1, 2, 3]
    empty = adjacency_from_edges(np.array([], np.int64), np.array([], np.int64), 4)
    assert detect_communities(empty, rng=np.random.default_rng(0)).tolist() == [0, 1, 2, 3]
    with pytest.raises(TypeError, match="rng"):
        detect_communities(adjacency, rng=3)
