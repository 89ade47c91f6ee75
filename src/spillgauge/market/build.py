"""The market: users, pools, the social graph and clusters, built once per scenario and seed."""

from __future__ import annotations

import hashlib
import os
import tempfile
from collections import OrderedDict
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import sparse

from spillgauge.errors import ScenarioError
from spillgauge.market.graph import (
    adjacency_from_edges,
    closed_neighbourhood_units,
    detect_communities,
    pool_block_adjacency,
    small_world_adjacency,
)
from spillgauge.market.population import Population, build_population, read_csv_columns
from spillgauge.scenario import Scenario
from spillgauge.scenario.config import CLUSTER_SOURCES
from spillgauge.seeding import MARKET, stream

__all__ = ["Market", "build_market", "CLUSTER_SOURCES"]

_CACHE: OrderedDict = OrderedDict()
_CACHE_SIZE = 4


@dataclass(frozen=True, eq=False)
class Market:
    """Users, pools, the social graph and their clusters.

    Attributes
    ----------
    scenario : Scenario
    seed : int
        The study seed the market was built from.
    population : Population
    adjacency : scipy.sparse.csr_array, shape (n_users, n_users)
        Symmetric 0/1 social graph.
    """

    scenario: Scenario
    seed: int
    population: Population
    adjacency: sparse.csr_array
    _clusters: dict = field(default_factory=dict, repr=False)

    @property
    def n_users(self) -> int:
        """Number of users."""
        return self.population.n_users

    @property
    def n_pools(self) -> int:
        """Number of stock pools."""
        return self.population.n_pools

    @property
    def pool_of_user(self) -> np.ndarray:
        """Home pool of each user, shape ``(n_users,)``."""
        return self.population.pool_of_user

    @property
    def n_ticks(self) -> int:
        """Number of ticks in the horizon."""
        return self.scenario.calendar.n_ticks

    @property
    def tick_hours(self) -> int:
        """Length of one tick in hours."""
        return self.scenario.calendar.tick_hours

    @property
    def carryover_half_life_hours(self) -> float:
        """Half-life of the treatment's effect after a unit leaves treatment, in hours."""
        return self.scenario.effect.carryover_half_life_hours

    def degree(self) -> np.ndarray:
        """Return each user's number of graph neighbours, shape ``(n_users,)``."""
        return np.diff(self.adjacency.indptr)

    def clusters(self, source: str = "pools", *, resolution: float = 1.0) -> np.ndarray:
        """Return a cluster label per user, numbered ``0..n_clusters-1``.

        Parameters
        ----------
        source : {"pools", "graph", "pools+graph"}
            ``"pools"``: each stock pool is a cluster. ``"graph"``: Louvain
            communities of the social graph at ``resolution``. ``"pools+graph"``:
            communities kept whole, each joined to the pool most of its members
            call home, so a cluster holds whole communities and (mostly) whole
            pools.
        resolution : float
            Louvain resolution; larger values give more, smaller communities.
        """
        if source not in CLUSTER_SOURCES:
            raise ScenarioError("design.clusters", "one of " + ", ".join(CLUSTER_SOURCES), source)
        key = (source, float(resolution) if source != "pools" else 1.0)
        if key not in self._clusters:
            if source == "pools":
                labels = self.pool_of_user
            else:
                communities = _cached_communities(self.adjacency, resolution=resolution,
                                                  seed=self.seed % (2**32))
                if source == "graph":
                    labels = communities
                else:
                    counts = sparse.csr_array(
                        (np.ones(self.n_users), (communities, self.pool_of_user)),
                        shape=(communities.max() + 1, self.n_pools)).toarray()
                    labels = counts.argmax(axis=1)[communities]
            labels = np.unique(labels, return_inverse=True)[1].astype(np.int64)
            labels.setflags(write=False)
            self._clusters[key] = labels
        return self._clusters[key]


    def neighbourhood_clusters(self, source: str = "pools", *, resolution: float = 1.0
                               ) -> sparse.csr_array:
        """Return which clusters touch each user's closed neighbourhood, cached.

        Shape ``(n_users, n_clusters)``; entry ``(i, c)`` is 1 when user ``i`` or a
        neighbour belongs to cluster ``c`` (the sets S_i of graph cluster
        randomization; Ugander et al. 2013). Clusters as :meth:`clusters`.
        """
        key = ("neighbourhood", source, float(resolution))
        if key not in self._clusters:
            labels = self.clusters(source, resolution=resolution)
            self._clusters[key] = closed_neighbourhood_units(self.adjacency, labels,
                                                             int(labels.max()) + 1)
        return self._clusters[key]


def _read_edges(market_users: Population, path: str) -> tuple[np.ndarray, np.ndarray]:
    columns = read_csv_columns(path, required=("user_a", "user_b"), field="graph.file")
    lookup = {str(uid): i for i, uid in enumerate(market_users.user_ids.tolist())}
    ends = []
    for name in ("user_a", "user_b"):
        try:
            ends.append(np.array([lookup[v] for v in columns[name]], dtype=np.int64))
        except KeyError as exc:
            raise ScenarioError(f"graph.file:{name}", "a user_id of the users", exc.args[0]) \
                from None
    return ends[0], ends[1]


def _market_key(scenario: Scenario, seed: int) -> tuple:
    return (scenario.users, scenario.pools, scenario.graph, int(seed))


def _cache_dir() -> Path | None:
    """Return the folder for cached communities (``SPILLGAUGE_CACHE``, else the user cache).

    ``SPILLGAUGE_CACHE=off`` disables the disk cache.
    """
    chosen = os.environ.get("SPILLGAUGE_CACHE")
    if chosen == "off":
        return None
    if chosen:
        return Path(chosen)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "spillgauge"


def _cached_communities(adjacency: sparse.csr_array, *, resolution: float, seed: int
                        ) -> np.ndarray:
    """Louvain communities, kept on disk keyed by the graph's contents, resolution and seed.

    Community detection is the slowest step of building a large market (about a
    minute at 100,000 users); the cache lets ``check``, ``run`` and later
    sweeps of the same graph skip it. A damaged or unreadable cache entry is
    recomputed.
    """
    folder = _cache_dir()
    digest = hashlib.sha256()
    for part in (adjacency.indptr, adjacency.indices):
        digest.update(np.ascontiguousarray(part, dtype=np.int64).tobytes())
    digest.update(f"{resolution!r}/{seed}/v1".encode())
    path = folder / f"communities-{digest.hexdigest()[:32]}.npy" if folder else None
    if path is not None and path.is_file():
        try:
            labels = np.load(path, allow_pickle=False)
            if labels.shape == (adjacency.shape[0],) and labels.dtype.kind == "i":
                return labels
        except (OSError, ValueError):
            pass
    labels = detect_communities(adjacency, resolution=resolution, seed=seed)
    if path is not None:
        try:
            folder.mkdir(parents=True, exist_ok=True)
            handle, temporary = tempfile.mkstemp(dir=folder, suffix=".npy.tmp")
            with os.fdopen(handle, "wb") as stream:
                np.save(stream, labels, allow_pickle=False)
            os.replace(temporary, path)
        except OSError:
            pass  # a cache that cannot be written is only slower
    return labels


def build_market(scenario: Scenario, seed: int | None = None) -> Market:
    """Build (or fetch from the cache) the market of a scenario.

    The market depends only on the ``[users]``, ``[pools]`` and ``[graph]``
    sections and the seed, so a sweep over effect sizes, the calendar or designs
    reuses it (in memory; graph communities are also kept on disk, see
    ``_cached_communities``). All randomness comes from the study seed's market
    stream.

    Parameters
    ----------
    scenario : Scenario
    seed : int, optional
        Study seed; defaults to ``scenario.study.seed``.
    """
    seed = scenario.study.seed if seed is None else int(seed)
    key = _market_key(scenario, seed)
    cached = _CACHE.get(key)
    if cached is not None:
        _CACHE.move_to_end(key)
        if cached.scenario is scenario:
            return cached
        return Market(scenario=scenario, seed=seed, population=cached.population,
                      adjacency=cached.adjacency, _clusters=cached._clusters)
    population_rng, graph_rng = (np.random.default_rng(s)
                                 for s in stream(seed, None, MARKET).spawn(2))
    population = build_population(scenario, rng=population_rng)
    spec = scenario.graph
    n = population.n_users
    if spec.model == "none" or spec.mean_degree == 0:
        adjacency = adjacency_from_edges(np.array([], np.int64), np.array([], np.int64), n)
    elif spec.model == "small_world":
        adjacency = small_world_adjacency(n, spec.mean_degree, spec.rewire_share, rng=graph_rng)
    elif spec.model == "pool_blocks":
        adjacency = pool_block_adjacency(population.pool_of_user, spec.mean_degree,
                                         spec.within_pool_share, rng=graph_rng)
    elif spec.model == "communities":
        community = graph_rng.integers(0, spec.community_count, size=n)
        adjacency = pool_block_adjacency(community, spec.mean_degree,
                                         spec.within_community_share, rng=graph_rng)
    else:
        adjacency = adjacency_from_edges(*_read_edges(population, spec.file), n)
    market = Market(scenario=scenario, seed=seed, population=population, adjacency=adjacency)
    _CACHE[key] = market
    while len(_CACHE) > _CACHE_SIZE:
        _CACHE.popitem(last=False)
    return market
