"""The social graph: generators aligned with pools, edge lists, and communities.

The hot path holds the graph as a symmetric ``scipy.sparse.csr_array``;
igraph finds its communities (Leiden) and networkx analyses it otherwise
(clustering coefficients, and Louvain as the reference in tests).
"""

from __future__ import annotations

import random

import numpy as np
from scipy import sparse

from spillgauge.seeding import check_rng

__all__ = [
    "adjacency_from_edges",
    "small_world_adjacency",
    "pool_block_adjacency",
    "to_networkx",
    "to_igraph",
    "detect_communities",
    "community_algorithm",
    "LEIDEN_ITERATIONS",
    "treated_neighbour_share",
    "closed_neighbourhood_units",
]


def adjacency_from_edges(sources: np.ndarray, targets: np.ndarray, n_users: int
                         ) -> sparse.csr_array:
    """Return the symmetric 0/1 adjacency of an undirected edge list.

    Self-loops are dropped and repeated edges count once.

    Examples
    --------
    >>> a = adjacency_from_edges(np.array([0, 1, 1, 2]), np.array([1, 0, 2, 2]), 3)
    >>> a.toarray().tolist()
    [[0.0, 1.0, 0.0], [1.0, 0.0, 1.0], [0.0, 1.0, 0.0]]
    """
    sources = np.asarray(sources, dtype=np.int64)
    targets = np.asarray(targets, dtype=np.int64)
    keep = sources != targets
    rows = np.concatenate([sources[keep], targets[keep]])
    cols = np.concatenate([targets[keep], sources[keep]])
    adjacency = sparse.csr_array((np.ones(rows.size), (rows, cols)), shape=(n_users, n_users))
    adjacency.sum_duplicates()
    adjacency.data[:] = 1.0
    return adjacency


def small_world_adjacency(n_users: int, mean_degree: float, rewire_share: float, *,
                          rng: np.random.Generator) -> sparse.csr_array:
    """Return a Watts–Strogatz small-world graph, built with vectorized numpy.

    Each user is joined to its ``k/2`` nearest ring neighbours on each side
    (``k`` = ``mean_degree`` rounded down to even), then each edge's far end is
    moved to a uniformly drawn user with probability ``rewire_share``
    (Watts & Strogatz 1998). Unlike networkx's loop, a rewired edge that lands
    on an existing edge or on itself is dropped, so the mean degree falls
    slightly (by well under 1% at the usual sizes).
    """
    check_rng(rng)
    half = int(mean_degree) // 2
    if half < 1 or n_users < 3:
        return adjacency_from_edges(np.array([], dtype=np.int64), np.array([], dtype=np.int64),
                                    n_users)
    half = min(half, (n_users - 1) // 2)
    ring = rng.permutation(n_users)  # ring positions are random, not tied to user order
    position = np.repeat(np.arange(n_users, dtype=np.int64), half)
    far = (position + np.tile(np.arange(1, half + 1), n_users)) % n_users
    sources, targets = ring[position], ring[far]
    rewired = rng.random(sources.size) < rewire_share
    targets[rewired] = rng.integers(0, n_users, size=int(rewired.sum()))
    return adjacency_from_edges(sources, targets, n_users)


def pool_block_adjacency(pool_of_user: np.ndarray, mean_degree: float,
                         within_pool_share: float, *, rng: np.random.Generator
                         ) -> sparse.csr_array:
    """Return a stochastic block model whose blocks are given (the stock pools, or communities).

    ``n_users * mean_degree / 2`` edges are drawn; each joins a uniformly drawn
    user to a partner drawn uniformly from the same pool with probability
    ``within_pool_share`` and from the whole market otherwise. Every pair in a
    block (and every pair across blocks) is then equally likely to be joined,
    as in a stochastic block model (Holland, Laskey & Leinhardt 1983). Repeated
    pairs and self-pairs are dropped, which lowers the mean degree slightly in
    small blocks (about 3% for blocks of 100 users at mean degree 8).
    """
    check_rng(rng)
    pool_of_user = np.asarray(pool_of_user, dtype=np.int64)
    n_users = pool_of_user.size
    n_edges = int(round(n_users * mean_degree / 2))
    order = np.argsort(pool_of_user, kind="stable")
    counts = np.bincount(pool_of_user)
    starts = np.cumsum(counts) - counts
    sources = rng.integers(0, n_users, size=n_edges)
    inside = rng.random(n_edges) < within_pool_share
    home = pool_of_user[sources]
    offsets = np.floor(rng.random(n_edges) * counts[home]).astype(np.int64)
    targets = np.where(inside, order[starts[home] + offsets],
                       rng.integers(0, n_users, size=n_edges))
    return adjacency_from_edges(sources, targets, n_users)


def to_networkx(adjacency: sparse.csr_array):
    """Return the graph as a networkx ``Graph`` with nodes ``0..n_users-1``.

    networkx is imported here, not at module load, so commands that never
    analyse the graph start faster.
    """
    import networkx as nx

    graph = nx.Graph()
    graph.add_nodes_from(range(adjacency.shape[0]))
    upper = sparse.triu(adjacency, k=1).tocoo()
    graph.add_edges_from(zip(upper.row.tolist(), upper.col.tolist()))
    return graph


LEIDEN_ITERATIONS = 4
"""Leiden iterations per community detection (see ``docs/performance.md`` for the evidence)."""


def community_algorithm() -> str:
    """Return the name, settings and igraph version of the community detection.

    Cached communities are keyed by it, so a change of method, setting or
    library version never reuses communities found another way.
    """
    import igraph

    return f"leiden-modularity/iterations={LEIDEN_ITERATIONS}/igraph-{igraph.__version__}"


def to_igraph(adjacency: sparse.csr_array):
    """Return the graph as an undirected igraph ``Graph`` with vertices ``0..n_users-1``.

    The edge list is the upper triangle of ``adjacency``, handed to igraph as one
    list of pairs (converted by numpy and read by igraph's C layer; no Python loop).
    igraph is imported here, not at module load.
    """
    import igraph

    upper = sparse.triu(adjacency, k=1).tocoo()
    edges = np.column_stack([upper.row, upper.col]).astype(np.int64, copy=False)
    return igraph.Graph(n=adjacency.shape[0], edges=edges.tolist(), directed=False)


class _GeneratorSource:
    """igraph's random-number interface served from a numpy ``Generator``.

    igraph asks for 32 random bits (``getrandbits(32)``) or a uniform float
    (``random()``) one at a time; both are drawn from the Generator in blocks
    and handed out in order, so the stream depends only on the Generator's seed.
    """

    _BLOCK = 1 << 16

    def __init__(self, rng: np.random.Generator) -> None:
        self._rng = check_rng(rng)
        self._bits = iter(())
        self._floats = iter(())

    def getrandbits(self, k: int) -> int:
        if k == 32:
            for value in self._bits:
                return value
            self._bits = iter(self._rng.integers(0, 1 << 32, size=self._BLOCK,
                                                 dtype=np.uint64).tolist())
            return next(self._bits)
        n_bytes = (k + 7) // 8
        return int.from_bytes(self._rng.bytes(n_bytes), "little") >> (8 * n_bytes - k)

    def random(self) -> float:
        for value in self._floats:
            return value
        self._floats = iter(self._rng.random(self._BLOCK).tolist())
        return next(self._floats)

    def randint(self, low: int, high: int) -> int:
        return int(self._rng.integers(low, high, endpoint=True))

    def gauss(self, mu: float, sigma: float) -> float:
        return float(self._rng.normal(mu, sigma))


def detect_communities(adjacency: sparse.csr_array, *, resolution: float = 1.0,
                       rng: np.random.Generator) -> np.ndarray:
    """Return a community label per user from Leiden modularity maximisation.

    Uses igraph's ``community_leiden`` with the modularity objective (Traag,
    Waltman & van Eck 2019) at ``resolution`` (gamma in
    ``Q = 1/(2m) sum_ij (A_ij - gamma k_i k_j / (2m)) delta(c_i, c_j)``, as in
    networkx's ``louvain_communities``), for :data:`LEIDEN_ITERATIONS`
    iterations. igraph's random numbers come from ``rng`` for this call only;
    igraph's own default (Python's ``random`` module) is put back afterwards.
    Isolated users form their own communities. Labels are numbered by the
    smallest user index in each community.

    Parameters
    ----------
    adjacency : csr_array, shape (n_users, n_users)
        Symmetric 0/1 graph.
    resolution : float
        Larger values give more, smaller communities.
    rng : numpy.random.Generator

    Returns
    -------
    ndarray of int, shape (n_users,)

    Examples
    --------
    >>> a = adjacency_from_edges(np.array([0, 0, 1, 3, 3, 4]), np.array([1, 2, 2, 4, 5, 5]), 7)
    >>> detect_communities(a, rng=np.random.default_rng(0)).tolist()
    [0, 0, 0, 1, 1, 1, 2]
    """
    import igraph

    source = _GeneratorSource(rng)
    graph = to_igraph(adjacency)
    igraph.set_random_number_generator(source)
    try:
        clustering = graph.community_leiden(objective_function="modularity",
                                            resolution=resolution,
                                            n_iterations=LEIDEN_ITERATIONS)
    finally:
        igraph.set_random_number_generator(random)
    membership = np.asarray(clustering.membership, dtype=np.int64)
    return _number_by_first_member(membership)


def _number_by_first_member(membership: np.ndarray) -> np.ndarray:
    """Renumber labels ``0..k-1`` in the order of each label's smallest member."""
    if membership.size == 0:
        return membership.astype(np.int64)
    _, first, inverse = np.unique(membership, return_index=True, return_inverse=True)
    rank = np.empty(first.size, dtype=np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(first.size)
    return rank[inverse.ravel()]


def treated_neighbour_share(adjacency: sparse.csr_array, dose: np.ndarray) -> np.ndarray:
    """Return each user's mean neighbour dose ``e_i``; 0 for a user with no neighbours.

    Parameters
    ----------
    adjacency : csr_array, shape (n_users, n_users)
    dose : ndarray of float, shape (n_users,)

    Examples
    --------
    >>> a = adjacency_from_edges(np.array([0, 0]), np.array([1, 2]), 4)
    >>> treated_neighbour_share(a, np.array([0.0, 1.0, 0.0, 1.0])).tolist()
    [0.5, 0.0, 0.0, 0.0]
    """
    degree = adjacency.sum(axis=1)
    neighbours = adjacency @ np.asarray(dose, dtype=float)
    return np.divide(neighbours, degree, out=np.zeros_like(neighbours), where=degree > 0)


def closed_neighbourhood_units(adjacency: sparse.csr_array, unit_of_user: np.ndarray,
                               n_units: int) -> sparse.csr_array:
    """Return the (n_users, n_units) 0/1 matrix of units touching each closed neighbourhood.

    Entry ``(i, u)`` is 1 when user ``i`` or one of its neighbours belongs to unit
    ``u`` (the set S_i of graph cluster randomization; Ugander et al. 2013).

    Examples
    --------
    >>> a = adjacency_from_edges(np.array([0, 1]), np.array([1, 2]), 3)
    >>> closed_neighbourhood_units(a, np.array([0, 0, 1]), 2).toarray().tolist()
    [[1.0, 0.0], [1.0, 1.0], [1.0, 1.0]]
    """
    n_users = adjacency.shape[0]
    unit_of_user = np.asarray(unit_of_user, dtype=np.int64)
    membership = sparse.csr_array((np.ones(n_users), (np.arange(n_users), unit_of_user)),
                                  shape=(n_users, n_units))
    closed = adjacency + sparse.eye_array(n_users, format="csr")
    touching = (closed @ membership).tocsr()
    touching.data[:] = 1.0
    return touching
