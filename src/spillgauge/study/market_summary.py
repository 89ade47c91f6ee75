"""A plain-data description of a market: what ``spillgauge check`` prints and reports show."""

from __future__ import annotations

import numpy as np

from spillgauge.market.build import Market
from spillgauge.market.calendar import trend_multiplier

__all__ = ["summarise_market", "sample_clustering"]

_CLUSTERING_SAMPLE = 2000
_COMMUNITY_LIMIT = 20_000  # above this many users, communities are found only when a design needs them


def sample_clustering(market: Market, *, n_sample: int = _CLUSTERING_SAMPLE) -> float:
    """Return the mean local clustering coefficient over a fixed sample of users.

    Users with fewer than two neighbours count as 0, as in
    :func:`networkx.average_clustering`. The sample is the first ``n_sample``
    users of a fixed permutation (the market seed), so the figure is
    reproducible.
    """
    adjacency = market.adjacency
    n = market.n_users
    if adjacency.nnz == 0:
        return 0.0
    rng = np.random.default_rng(market.seed)
    users = rng.permutation(n)[:n_sample] if n > n_sample else np.arange(n)
    values = np.zeros(users.size)
    indptr, indices = adjacency.indptr, adjacency.indices
    for k, i in enumerate(users):
        neighbours = indices[indptr[i]:indptr[i + 1]]
        d = neighbours.size
        if d < 2:
            continue
        sub = adjacency[neighbours][:, neighbours]
        values[k] = sub.sum() / (d * (d - 1))
    return float(values.mean())


def summarise_market(market: Market, *, communities: bool | None = None) -> dict:
    """Return the market's size, graph, supply tightness and cluster counts as plain data.

    Supply tightness is each pool's order-up-to level S over its expected demand
    per restock cycle, with everyone untreated and with everyone treated (own
    lift, and peer lift for users with neighbours): a cover below 1 means stock
    binds on an average cycle. ``demand_growth_by_end`` is the calendar trend's
    demand multiplier at the horizon (1 without a trend): a cover divided by it is
    the cover on the last cycle.
    """
    scenario = market.scenario
    population = market.population
    effect = scenario.effect
    every = scenario.pools.restock_every_hours
    degree = market.degree()
    control = np.bincount(population.pool_of_user, weights=population.rate_per_hour,
                          minlength=market.n_pools) * every
    treated_rate = population.rate_per_hour * (1 + effect.lift) * np.where(
        degree > 0, 1 + effect.peer_lift, 1.0)
    treated = np.bincount(population.pool_of_user, weights=treated_rate,
                          minlength=market.n_pools) * every
    with np.errstate(divide="ignore", invalid="ignore"):
        cover_control = np.where(control > 0, population.order_up_to / control, np.inf)
        cover_treated = np.where(treated > 0, population.order_up_to / treated, np.inf)
    users_per_pool = np.bincount(population.pool_of_user, minlength=market.n_pools)
    clusters = {"pools": int(market.n_pools)}
    if communities is None:
        communities = market.adjacency.nnz > 0 and market.n_users <= _COMMUNITY_LIMIT
    if communities and market.adjacency.nnz > 0:
        clusters["graph"] = int(market.clusters("graph").max()) + 1
        clusters["pools+graph"] = int(market.clusters("pools+graph").max()) + 1
    finite = np.isfinite(cover_control)
    return {
        "users": int(market.n_users),
        "pools": int(market.n_pools),
        "users_per_pool": {"min": int(users_per_pool.min()), "mean": float(users_per_pool.mean()),
                           "max": int(users_per_pool.max())},
        "orders_per_user_week": float(population.rate_per_hour.mean() * 168),
        "graph_model": scenario.graph.model,
        "mean_degree": float(degree.mean()),
        "isolated_share": float(np.mean(degree == 0)),
        "clustering": sample_clustering(market),
        "order_up_to": {"min": int(population.order_up_to.min()),
                        "mean": float(population.order_up_to.mean()),
                        "max": int(population.order_up_to.max())},
        "cover_all_control": {"min": float(cover_control[finite].min()) if finite.any() else None,
                              "median": float(np.median(cover_control[finite]))
                              if finite.any() else None},
        "cover_all_treated": {"min": float(cover_treated[finite].min()) if finite.any() else None,
                              "median": float(np.median(cover_treated[finite]))
                              if finite.any() else None},
        "demand_growth_by_end": float(trend_multiplier(
            np.array([float(market.n_ticks * market.tick_hours)]),
            scenario.calendar.trend_per_week)[0]),
        "clusters": clusters,
    }
