"""The reference workload shared by the two reference programs (not part of spillgauge).

Model (both programs):

* N users, each with a home pool drawn uniformly from K pools and a base demand
  ``lam_i ~ Gamma(shape 2, mean 5)`` orders per 28 days.
* Hours run over D days; the diurnal multiplier is
  ``m(h) = 1 + 0.5 sin(2 pi ((h mod 24) - 6) / 24)`` with h continuous.
* The social graph is ``networkx.watts_strogatz_graph(N, k=10, p=0.1)``, built once
  per run (its build time is printed apart and left out of events/s).
* Each replication draws ``T_i ~ Bernoulli(0.5)`` first; ``f_i`` is the share of i's
  neighbours who are treated; the rate is
  ``lam_i / (28 * 24) * (1 + 0.2 T_i) * (1 + 0.1 f_i) * m(h)`` orders per hour.
* Pool k is refilled to ``S_k = ceil(F * sum_{i in k} lam_i / 28)`` at hour 0 of every
  day (no lead time); an order that finds its pool empty is lost.
* Seeding: ``SeedSequence(seed).spawn(R + 1)``: child 0 draws the population (pools,
  rates, graph seed), child r + 1 drives replication r.

Each program supplies ``simulate(workload, treated, rate_per_hour, rng)`` returning
``(attempts, fulfilled_per_user, lost)``; :func:`main` times it and prints one
``rep r:`` line per replication, a ``graph_build_s=`` line and a ``summary:`` line.
events/s is order attempts (accepted arrivals after thinning) per second of the
simulation part (every replication, with its treatment draw and neighbour shares).
"""

from __future__ import annotations

import argparse
import math
import time
from dataclasses import dataclass

import networkx as nx
import numpy as np

DAY_HOURS = 24
RATE_DAYS = 28          # base rates are orders per 28 days
MEAN_ORDERS = 5.0       # mean of lam_i
RATE_SHAPE = 2.0        # Gamma shape of lam_i
LIFT, PEER_LIFT = 0.2, 0.1
AMPLITUDE = 0.5
DEGREE, REWIRE = 10, 0.1


@dataclass(frozen=True)
class Workload:
    """The population and graph of one run."""

    n_users: int
    n_pools: int
    days: int
    pool_of_user: np.ndarray      # (n_users,) int
    orders_per_28_days: np.ndarray  # (n_users,) float, lam_i
    order_up_to: np.ndarray       # (n_pools,) int, S_k
    edges: np.ndarray             # (n_edges, 2) int, each undirected edge once

    @property
    def horizon_hours(self) -> int:
        return self.days * DAY_HOURS


def diurnal(hour):
    """Return ``m(h)`` (works on floats and arrays)."""
    if isinstance(hour, float):
        return 1.0 + AMPLITUDE * math.sin(2.0 * math.pi * ((hour % DAY_HOURS) - 6.0) / DAY_HOURS)
    return 1.0 + AMPLITUDE * np.sin(2.0 * np.pi * ((hour % DAY_HOURS) - 6.0) / DAY_HOURS)


def parse_arguments(description: str) -> argparse.Namespace:
    parser = argparse.ArgumentParser(description=description)
    parser.add_argument("--users", type=int, default=20000)
    parser.add_argument("--pools", type=int, default=50)
    parser.add_argument("--days", type=int, default=28)
    parser.add_argument("--reps", type=int, default=1)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--tightness", type=float, default=0.9)
    parser.add_argument("--quiet", action="store_true", help="skip the per-replication lines")
    return parser.parse_args()


def build_workload(args: argparse.Namespace, rng: np.random.Generator) -> tuple[Workload, float]:
    """Draw the population from ``rng`` and build the graph; return it and the graph's build time."""
    pool_of_user = rng.integers(args.pools, size=args.users)
    lam = rng.gamma(RATE_SHAPE, MEAN_ORDERS / RATE_SHAPE, size=args.users)
    graph_seed = int(rng.integers(2**31 - 1))
    expected_daily = np.bincount(pool_of_user, weights=lam, minlength=args.pools) / RATE_DAYS
    order_up_to = np.ceil(args.tightness * expected_daily).astype(np.int64)
    start = time.perf_counter()
    graph = nx.watts_strogatz_graph(args.users, DEGREE, REWIRE, seed=graph_seed)
    edges = np.array(graph.edges(), dtype=np.int64).reshape(-1, 2)
    build_s = time.perf_counter() - start
    return Workload(n_users=args.users, n_pools=args.pools, days=args.days,
                    pool_of_user=pool_of_user, orders_per_28_days=lam,
                    order_up_to=order_up_to, edges=edges), build_s


def rate_per_hour(workload: Workload, treated: np.ndarray) -> np.ndarray:
    """Return each user's rate per hour without the diurnal factor, shape ``(n_users,)``."""
    u, v = workload.edges[:, 0], workload.edges[:, 1]
    n = workload.n_users
    degree = np.bincount(u, minlength=n) + np.bincount(v, minlength=n)
    t = treated.astype(float)
    treated_neighbours = np.bincount(u, weights=t[v], minlength=n) + \
        np.bincount(v, weights=t[u], minlength=n)
    share = np.divide(treated_neighbours, degree, out=np.zeros(n), where=degree > 0)
    return (workload.orders_per_28_days / (RATE_DAYS * DAY_HOURS) * (1.0 + LIFT * t)
            * (1.0 + PEER_LIFT * share))


def main(simulate, description: str, *, start: float) -> None:
    """Run the replications of one reference program and print its lines.

    ``start`` is the program's ``time.perf_counter()`` before its first import of numpy.
    """
    args = parse_arguments(description)
    children = np.random.SeedSequence(args.seed).spawn(args.reps + 1)
    workload, build_s = build_workload(args, np.random.default_rng(children[0]))
    totals = {"attempts": 0, "fulfilled": 0, "lost": 0}
    diffs = []
    sim_s = 0.0
    for r in range(args.reps):
        rep_start = time.perf_counter()
        rng = np.random.default_rng(children[r + 1])
        treated = rng.random(workload.n_users) < 0.5
        rate = rate_per_hour(workload, treated)
        attempts, fulfilled, lost = simulate(workload, treated, rate, rng)
        sim_s += time.perf_counter() - rep_start
        diff = float(fulfilled[treated].mean() - fulfilled[~treated].mean())
        diffs.append(diff)
        expected = float(rate.sum()) * workload.horizon_hours  # mean of m(h) over whole days is 1
        for key, value in zip(totals, (attempts, int(fulfilled.sum()), lost)):
            totals[key] += value
        if not args.quiet:
            print(f"rep {r}: attempts={attempts} fulfilled={int(fulfilled.sum())} lost={lost} "
                  f"diff_fulfilled={diff:.6f} expected_attempts={expected:.2f}", flush=True)
    print(f"graph_build_s={build_s:.4f}")
    reps = args.reps
    sd = float(np.std(diffs, ddof=1)) if reps > 1 else float("nan")
    fill = totals["fulfilled"] / totals["attempts"] if totals["attempts"] else float("nan")
    print(f"summary: users={workload.n_users} reps={reps} "
          f"attempts_per_rep={totals['attempts'] / reps:.1f} "
          f"fulfilled_per_rep={totals['fulfilled'] / reps:.1f} "
          f"lost_per_rep={totals['lost'] / reps:.1f} fill_rate={fill:.5f} "
          f"diff_fulfilled_mean={float(np.mean(diffs)):.6f} diff_fulfilled_sd={sd:.6f} "
          f"graph_build_s={build_s:.4f} sim_s={sim_s:.4f} "
          f"total_wall_s={time.perf_counter() - start:.4f} "
          f"events_per_s={totals['attempts'] / sim_s:.6g}", flush=True)
