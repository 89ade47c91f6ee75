"""Benchmark: graph clusters (Leiden) at scale, beside networkx's Louvain and pool clusters.

In fresh processes, alternating and repeated, it measures

1. community detection on a pool-aligned graph (pools of 1,000 users, mean degree
   8, 90% of edges inside the pool): spillgauge's ``detect_communities`` (igraph's
   Leiden, the igraph graph built from the edge arrays included) and, up to
   ``--louvain-max`` users, networkx's ``louvain_communities`` on the same graph
   (the networkx graph built from the same arrays included). It prints wall and CPU
   seconds, the number of communities, their modularity and the adjusted Rand index
   against the planted pools;
2. a whole ``spillgauge run`` (one replication, one worker, disk cache off) of the
   same market with a graph-cluster design, and with a pool-cluster design.

Wall times depend on the machine's load; CPU seconds of the child process are
printed beside them. The ratios are the targets of ``docs/performance.md``.

Usage (from the repository root)::

    python benchmarks/graph_clusters.py --sizes 100000 1000000 --run-users 100000 --repeat 3
"""

from __future__ import annotations

import argparse
import os
import re
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
USERS_PER_POOL = 1000
SCENARIO = """name = "graph_clusters_{users}_{source}"
description = "A pool-aligned market for the graph-cluster benchmark."
[calendar]
days = 28
diurnal_amplitude = 0.4
[users]
count = {users}
orders_per_week = 1.5
rate_shape = 2.0
history_days = 28
[pools]
count = {pools}
restock_every_hours = 24
stock_cover = 2.0
[graph]
model = "pool_blocks"
mean_degree = 8
within_pool_share = 0.9
[effect]
lift = 0.1
peer_lift = 0.5
[study]
reps = 1
seed = 3
[[design]]
kind = "cluster"
clusters = "{source}"
"""


def _child(method: str, users: int) -> None:
    """Build the graph, find its communities with ``method`` and print one line of figures."""
    import igraph
    import numpy as np

    from spillgauge.market.graph import detect_communities, pool_block_adjacency, to_networkx

    rng = np.random.default_rng(1)
    pools = rng.integers(0, max(users // USERS_PER_POOL, 1), size=users)
    adjacency = pool_block_adjacency(pools, 8, 0.9, rng=rng)
    wall, cpu = time.perf_counter(), time.process_time()
    if method == "leiden":
        labels = detect_communities(adjacency, rng=np.random.default_rng(2))
    else:
        import networkx as nx

        communities = nx.community.louvain_communities(to_networkx(adjacency), seed=2)
        labels = np.empty(users, dtype=np.int64)
        for label, members in enumerate(communities):
            labels[list(members)] = label
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    upper = adjacency.nnz // 2
    from spillgauge.market.graph import to_igraph

    graph = to_igraph(adjacency)
    modularity = graph.modularity(labels.tolist())
    ari = igraph.compare_communities(labels.tolist(), pools.tolist(), method="adjusted_rand")
    print(f"result: wall_s={wall:.3f} cpu_s={cpu:.3f} edges={upper} "
          f"communities={labels.max() + 1} modularity={modularity:.5f} ari={ari:.4f}", flush=True)


def _measure(command: list[str], env: dict | None = None) -> dict:
    out = subprocess.run([sys.executable, str(HERE / "_peak.py"), *command], capture_output=True,
                         text=True, check=True, env=env).stdout
    lines = " ".join(line for line in out.splitlines() if line.startswith(("peak:", "result:")))
    return {k: float(v) for k, v in re.findall(r"(\w+)=([-+\d.e]+)", lines)}


def _median(rows: list[dict], key: str) -> float:
    return statistics.median(row[key] for row in rows)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="*", default=[100000, 1000000],
                        help="graph sizes for community detection")
    parser.add_argument("--louvain-max", type=int, default=100000,
                        help="largest size at which networkx's Louvain also runs")
    parser.add_argument("--run-users", type=int, nargs="*", default=[100000],
                        help="market sizes for the whole-run comparison")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--louvain-repeat", type=int, default=1,
                        help="repeats of networkx's Louvain (minutes at 100,000 users)")
    parser.add_argument("--child", nargs=2, metavar=("METHOD", "USERS"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        _child(args.child[0], int(args.child[1]))
        return

    print(f"load average at start: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    print(f"{'users':>9} {'method':<8} {'wall s':>8} {'cpu s':>8} {'peak MiB':>9} "
          f"{'communities':>11} {'modularity':>10} {'ARI':>6}")
    for users in args.sizes:
        methods = ["leiden"] + (["louvain"] if users <= args.louvain_max else [])
        rows = {m: [] for m in methods}
        for rep in range(args.repeat):
            for method in methods:
                if method == "louvain" and rep >= args.louvain_repeat:
                    continue
                rows[method].append(_measure([sys.executable, __file__, "--child", method,
                                              str(users)]))
        for method in methods:
            r = rows[method]
            wall, cpu = _median(r, "wall_s"), _median(r, "cpu_s")
            print(f"{users:>9} {method:<8} {wall:>8.2f} {cpu:>8.2f} "
                  f"{_median(r, 'maxrss_mib'):>9.0f} {_median(r, 'communities'):>11.0f} "
                  f"{_median(r, 'modularity'):>10.4f} {_median(r, 'ari'):>6.3f}", flush=True)
        if "louvain" in rows:
            louvain, leiden = rows["louvain"], rows["leiden"]
            print(f"{'':>9} ratio louvain / leiden, wall: "
                  f"{_median(louvain, 'wall_s') / _median(leiden, 'wall_s'):.1f}; "
                  f"cpu: {_median(louvain, 'cpu_s') / _median(leiden, 'cpu_s'):.1f}", flush=True)
        if users >= 1_000_000:
            print(f"{'':>9} target: graph clusters of {users:,} users under 60 s: "
                  f"{_median(rows['leiden'], 'wall_s'):.1f} s wall", flush=True)

    tmp = Path(tempfile.mkdtemp(prefix="spillgauge-graph-bench-"))
    env = {**os.environ, "SPILLGAUGE_CACHE": "off"}
    for users in args.run_users:
        runs = {"graph": [], "pools": []}
        for source in runs:
            path = tmp / f"market_{users}_{source}.toml"
            path.write_text(SCENARIO.format(users=users, pools=max(users // USERS_PER_POOL, 1),
                                            source=source))
        for rep in range(args.repeat):
            for source in runs:
                command = [sys.executable, "-m", "spillgauge.cli", "run",
                           str(tmp / f"market_{users}_{source}.toml"), "--reps", "1",
                           "--workers", "1", "--out", str(tmp / f"out_{users}_{source}_{rep}")]
                runs[source].append(_measure(command, env))
        graph_s, pools_s = _median(runs["graph"], "wall_s"), _median(runs["pools"], "wall_s")
        print(f"\nwhole `spillgauge run`, {users:,} users, 1 replication, 1 worker, cache off: "
              f"graph clusters {graph_s:.1f} s, pool clusters {pools_s:.1f} s, "
              f"ratio {graph_s / pools_s:.2f} (target <= 2); peak "
              f"{_median(runs['graph'], 'maxrss_mib'):.0f} / "
              f"{_median(runs['pools'], 'maxrss_mib'):.0f} MiB", flush=True)
    print(f"load average at end: {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
