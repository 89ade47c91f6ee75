"""Write the invented data of the calibration worked example (docs/calibration.md).

Run from anywhere::

    python docs/calibration/make_example.py

It writes, next to this script:

- ``users.csv``: ``user_id, pool_id, history_orders`` for 1,500 users
  (``u00001`` ...), with 28 days of pre-period order counts drawn from a
  Gamma-Poisson model: each user's rate is Gamma with shape 1.5 and mean
  1.8 orders per week, and the count is Poisson(rate x 4 weeks).
- ``pools.csv``: ``pool_id, order_up_to`` for six depots (``depot-north`` ...),
  each stocked to its own multiple of its users' mean daily pre-period orders.
- ``edges.csv``: ``user_a, user_b``, a social graph of 60 friendship circles
  (about 25 users each); a circle lives mostly in one depot's area, and most
  friendships stay inside a circle.
- ``calibrated.toml``: a scenario reading the three files by relative paths.

Everything is invented and drawn with a fixed seed, so the files are the same
on every run. The rates the scenario simulates are *not* in users.csv: the
simulator estimates them from ``history_orders`` (``users.history_days = 28``)
by Gamma-Poisson empirical Bayes (``spillgauge.market.population.estimate_rates``).
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

__all__ = ["write_example"]

SEED = 20240601
N_USERS = 1500
HISTORY_DAYS = 28
ORDERS_PER_WEEK = 1.8        # mean rate of the invented population
RATE_SHAPE = 1.5             # Gamma shape of the invented rates
POOLS = ("depot-north", "depot-south", "depot-east", "depot-west", "depot-central",
         "depot-harbour")
POOL_WEIGHTS = (0.22, 0.20, 0.18, 0.16, 0.14, 0.10)   # share of users per depot
STOCK_COVER = (1.05, 1.10, 1.15, 1.25, 1.40, 2.00)    # S / mean daily pre-period orders
N_CIRCLES = 60
CIRCLE_IN_HOME_DEPOT = 0.85  # share of a circle's members whose depot is the circle's
MEAN_DEGREE = 6.0
WITHIN_CIRCLE = 0.9          # share of friendships inside a circle

SCENARIO = '''\
# calibrated: the worked example of docs/calibration.md. Invented data.
# users.csv holds pre-period order counts (history_orders), not rates: the
# rates are estimated from them by Gamma-Poisson empirical Bayes over the
# users.history_days = 28 days of the pre-period.
name = "calibrated"
description = """Six depots and 1,500 users read from CSV files (invented data): rates
estimated from 28 days of pre-period orders, stock levels and a friendship graph
from the files."""

[calendar]
days = 28
tick_hours = 1
diurnal_amplitude = 0.5

[users]
file = "users.csv"          # user_id, pool_id, history_orders
history_days = 28           # the pre-period that history_orders covers

[pools]
file = "pools.csv"          # pool_id, order_up_to
restock_every_hours = 24
lead_time_hours = 0
on_stockout = "lost"

[graph]
model = "edge_list"
file = "edges.csv"          # user_a, user_b

[effect]
lift = 0.2
peer_lift = 0.3
carryover_half_life_hours = 0

[study]
reps = 200
seed = 2

[[design]]
kind = "user"

[[design]]
kind = "user"
adjust = true

[[design]]
kind = "cluster"
clusters = "pools"

[[design]]
kind = "cluster"
clusters = "graph"

[[design]]
kind = "switchback"
per = "market"
block_hours = 24
'''


def _write_csv(path: Path, header: tuple[str, ...], rows) -> None:
    with open(path, "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)


def _friendships(circle: np.ndarray, *, rng: np.random.Generator) -> np.ndarray:
    """Return unique undirected edges (i < j): most join two members of one circle."""
    n_users = circle.size
    n_draws = round(n_users * MEAN_DEGREE / 2)
    members = [np.flatnonzero(circle == c) for c in range(N_CIRCLES)]
    sources = rng.integers(0, n_users, size=n_draws)
    inside = rng.random(n_draws) < WITHIN_CIRCLE
    targets = rng.integers(0, n_users, size=n_draws)
    for k in np.flatnonzero(inside):
        group = members[circle[sources[k]]]
        targets[k] = group[rng.integers(0, group.size)]
    keep = sources != targets
    pairs = np.sort(np.stack([sources[keep], targets[keep]], axis=1), axis=1)
    return np.unique(pairs, axis=0)


def write_example(folder: Path) -> list[Path]:
    """Write users.csv, pools.csv, edges.csv and calibrated.toml into ``folder``."""
    rng = np.random.default_rng(SEED)
    n_pools = len(POOLS)
    circle_pool = rng.choice(n_pools, size=N_CIRCLES, p=POOL_WEIGHTS)
    circle = rng.integers(0, N_CIRCLES, size=N_USERS)
    stays = rng.random(N_USERS) < CIRCLE_IN_HOME_DEPOT
    pool = np.where(stays, circle_pool[circle], rng.choice(n_pools, size=N_USERS, p=POOL_WEIGHTS))
    rate_per_week = rng.gamma(RATE_SHAPE, ORDERS_PER_WEEK / RATE_SHAPE, size=N_USERS)
    history = rng.poisson(rate_per_week * HISTORY_DAYS / 7.0)
    user_ids = [f"u{i:05d}" for i in range(1, N_USERS + 1)]

    daily = np.bincount(pool, weights=history, minlength=n_pools) / HISTORY_DAYS
    order_up_to = np.ceil(np.asarray(STOCK_COVER) * daily).astype(int)
    edges = _friendships(circle, rng=rng)

    folder.mkdir(parents=True, exist_ok=True)
    paths = [folder / name for name in ("users.csv", "pools.csv", "edges.csv",
                                        "calibrated.toml")]
    _write_csv(paths[0], ("user_id", "pool_id", "history_orders"),
               zip(user_ids, (POOLS[k] for k in pool), history.tolist()))
    _write_csv(paths[1], ("pool_id", "order_up_to"), zip(POOLS, order_up_to.tolist()))
    _write_csv(paths[2], ("user_a", "user_b"),
               ((user_ids[a], user_ids[b]) for a, b in edges.tolist()))
    paths[3].write_text(SCENARIO, encoding="utf-8")
    return paths


if __name__ == "__main__":
    for path in write_example(Path(__file__).resolve().parent):
        print(f"wrote {path.name}")
