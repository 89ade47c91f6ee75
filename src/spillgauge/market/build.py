"""The market: users, pools, the social graph and clusters, built once per scenario and seed."""

from __future__ import annotations

import dataclasses
import hashlib
import os
import tempfile
import zipfile
from collections import OrderedDict
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import sparse

from spillgauge.errors import ScenarioError
from spillgauge.market.graph import (
    adjacency_from_edges,
    closed_neighbourhood_units,
    community_algorithm,
    detect_communities,
    pool_block_adjacency,
    small_world_adjacency,
)
from spillgauge.market.population import Population, build_population, read_csv_columns
from spillgauge.scenario import Scenario
from spillgauge.scenario.config import CLUSTER_SOURCES
from spillgauge.seeding import MARKET, stream

__all__ = ["Market", "build_market", "draw_basket_values", "CLUSTER_SOURCES"]

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
    def history(self) -> np.ndarray:
        """Each user's pre-period orders, shape ``(n_users,)``."""
        return self.population.history

    @property
    def rate_per_hour(self) -> np.ndarray:
        """Each user's base demand rate, orders per hour, shape ``(n_users,)``."""
        return self.population.rate_per_hour

    @property
    def basket_value(self) -> np.ndarray:
        """Value of each of a user's fulfilled orders, shape ``(n_users,)``."""
        return self.population.basket_value

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
            ``"pools"``: each stock pool is a cluster. ``"graph"``: Leiden
            communities of the social graph at ``resolution``. ``"pools+graph"``:
            communities kept whole, each joined to the pool most of its members
            call home, so a cluster holds whole communities and (mostly) whole
            pools.
        resolution : float
            Modularity resolution; larger values give more, smaller communities.
        """
        if source not in CLUSTER_SOURCES:
            raise ScenarioError("design.clusters", "one of " + ", ".join(CLUSTER_SOURCES), source)
        key = (source, float(resolution) if source != "pools" else 1.0)
        if key not in self._clusters:
            if source == "pools":
                labels = self.pool_of_user
            else:
                communities = _cached_communities(self.adjacency, resolution=resolution,
                                                  seed=self.seed)
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
        for k, value in enumerate(columns[name]):
            if value not in lookup:
                raise ScenarioError(f"graph.file:{name} (line {columns.lines[k]})",
                                    "a user_id of the users", value)
        ends.append(np.array([lookup[v] for v in columns[name]], dtype=np.int64))
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


_COMMUNITIES = 2  # market stream key of community detection (0, 1: population, graph)
_BASKET_VALUES = 3  # market stream key of the users' basket values (drawn only when sd > 0)


def _cached_communities(adjacency: sparse.csr_array, *, resolution: float, seed: int
                        ) -> np.ndarray:
    """Leiden communities, kept on disk keyed by the graph, resolution, seed and method.

    The random numbers come from the study seed's market stream. The key holds
    :func:`~spillgauge.market.graph.community_algorithm` (method, iterations,
    igraph version), so communities found another way (an older cache made by
    Louvain, another igraph) are never reused. The file also records its key and
    a digest of its labels; an entry that cannot be read, does not match its key
    or its digest, or is not a labelling of these users is recomputed.
    """
    folder = _cache_dir()
    digest = hashlib.sha256()
    for part in (adjacency.indptr, adjacency.indices):
        digest.update(np.ascontiguousarray(part, dtype=np.int64).tobytes())
    digest.update(f"{resolution!r}/{seed}/{community_algorithm()}".encode())
    key = digest.hexdigest()
    path = folder / f"communities-leiden-{key[:32]}.npz" if folder else None
    if path is not None and path.is_file():
        labels = _read_communities(path, key, adjacency.shape[0])
        if labels is not None:
            return labels
    rng = np.random.default_rng(stream(seed, None, MARKET, _COMMUNITIES))
    labels = detect_communities(adjacency, resolution=resolution, rng=rng)
    if path is not None:
        try:
            folder.mkdir(parents=True, exist_ok=True)
            handle, temporary = tempfile.mkstemp(dir=folder, suffix=".npz.tmp")
            with os.fdopen(handle, "wb") as out:
                np.savez(out, labels=labels, key=np.array(key),
                         labels_sha256=np.array(_labels_digest(labels)))
            os.replace(temporary, path)
        except OSError:
            pass  # a cache that cannot be written is only slower
    return labels


def _labels_digest(labels: np.ndarray) -> str:
    return hashlib.sha256(np.ascontiguousarray(labels, dtype=np.int64).tobytes()).hexdigest()


def _read_communities(path: Path, key: str, n_users: int) -> np.ndarray | None:
    """Return the cached labels at ``path``, or None if the entry cannot be trusted."""
    try:
        with np.load(path, allow_pickle=False) as entry:
            labels = entry["labels"]
            stored_key = str(entry["key"])
            stored_digest = str(entry["labels_sha256"])
    except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile):
        return None
    if (stored_key != key or labels.shape != (n_users,) or labels.dtype != np.int64
            or stored_digest != _labels_digest(labels)):
        return None
    if n_users and (labels[0] != 0 or np.any(np.diff(np.maximum.accumulate(labels)) > 1)
                    or labels.min() < 0):
        return None  # not numbered 0..k-1 by smallest member
    return labels


def draw_basket_values(users, n_users: int, seed: int) -> np.ndarray:
    """Return each user's basket value: ``users.basket_value_mean`` for all, or lognormal.

    With ``basket_value_sd = s > 0`` and mean ``m`` the values are lognormal with
    ``sigma^2 = log(1 + s^2 / m^2)`` and ``mu = log(m) - sigma^2 / 2``, so their mean
    is ``m`` and their SD ``s`` (Johnson, Kotz & Balakrishnan 1994, ch. 14), drawn
    on the market's own basket stream: a scenario without a spread draws nothing.

    >>> from spillgauge.scenario.config import Users
    >>> draw_basket_values(Users(basket_value_mean=2.5), 3, 0).tolist()
    [2.5, 2.5, 2.5]
    """
    mean, sd = float(users.basket_value_mean), float(users.basket_value_sd)
    if sd == 0:
        return np.full(n_users, mean)
    sigma2 = np.log1p((sd / mean) ** 2)
    rng = np.random.default_rng(stream(seed, None, MARKET, _BASKET_VALUES))
    return rng.lognormal(np.log(mean) - sigma2 / 2, np.sqrt(sigma2), size=n_users)


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
    if population.basket_value is None:
        population = dataclasses.replace(population, basket_value=draw_basket_values(
            scenario.users, population.n_users, seed))
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
