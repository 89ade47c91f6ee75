"""Estimate a run's memory before it starts, and refuse a run that cannot fit."""

from __future__ import annotations

import math
import os

from spillgauge.errors import MemoryLimitError
from spillgauge.scenario import Scenario

__all__ = ["estimate_memory_bytes", "available_memory_bytes", "check_memory"]

_BYTES_PER_CANDIDATE = 72       # event arrays of one replication (user, time, tick, pool, ...)
_BYTES_PER_CANDIDATE_WORLD = 5  # per world: accepted / served flags and a float transient
_BYTES_PER_USER_WORLD = 40      # per-user totals (placed, fulfilled) of each world and a count
_BYTES_PER_USER_DAY_WORLD = 16  # fulfilled and demanded per user and day, and the count
_BYTES_PER_USER = 120           # population, clusters, graph degree
_BYTES_PER_EDGE = 24            # symmetric CSR adjacency (data + index, both directions)
_BYTES_PER_EDGE_BUILD = 110     # building the graph (edge arrays, sort, dedupe): measured 106
_BASE_BYTES = 200 * 2**20       # interpreter, numpy, scipy, networkx, simpy
_BYTES_PER_POOL_TICK_WORLD = 32  # per world: four int64 (n_pools, n_ticks) tables (panel.py)
_TRACED_POOLS = 4                # the first replication keeps per-tick traces of 4 pools,
_BYTES_PER_TRACED_TICK = 3 * 8 + 28  # as 3 Python int lists (8-byte pointers; stock > 256)
_BYTES_PER_REPLICATION = 4096    # a saved replication's truth and records, held to the end,
_BYTES_PER_REPLICATION_DESIGN = 2048  # and one estimate per design
_BYTES_PER_CLUSTER = 64           # CR2 sums over clusters: a few float64 per cluster
# a switchback's variance: (units, periods, block ticks) arrays and its low-rank factors; measured
# 110 bytes per unit-tick (benchmarks/switchback_variance_memory.py: 38 MiB for 4 pools x 3,650
# days of 6 h blocks)
_BYTES_PER_BLOCK_TICK = 160


def _orders_per_week(scenario: Scenario) -> float:
    """Mean orders per user-week: the scenario's, or the users file's own figures."""
    users = scenario.users
    if users.file is None:
        return users.orders_per_week
    from spillgauge.market.population import read_csv_columns

    columns = read_csv_columns(users.file, required=("user_id", "pool_id"),
                               optional=("orders_per_week", "history_orders"),
                               field="users.file")
    try:
        if "orders_per_week" in columns:
            values = [float(v) for v in columns["orders_per_week"]]
            if all(map(math.isfinite, values)):
                return max(sum(values) / len(values), 0.0)
        elif "history_orders" in columns and users.history_days > 0:
            values = [float(v) for v in columns["history_orders"]]
            if all(map(math.isfinite, values)):
                return sum(values) / len(values) / users.history_days * 7
    except ValueError:
        pass  # the population builder names the bad value
    return users.orders_per_week


def _expected_candidates(scenario: Scenario) -> float:
    users, calendar, effect = scenario.users, scenario.calendar, scenario.effect
    peak = (1 + calendar.diurnal_amplitude) * max(1.0, 1 + effect.lift) * max(
        1.0, 1 + effect.peer_lift) * (1 + 2 * calendar.daily_shock_sd)
    n_users = users.count if users.file is None else _count_lines(users.file)
    return n_users * _orders_per_week(scenario) / 168.0 * calendar.horizon_hours * peak


def _count_lines(path: str) -> int:
    with open(path, "rb") as handle:
        return max(sum(1 for _ in handle) - 1, 1)


def estimate_memory_bytes(scenario: Scenario, *, n_worlds: int | None = None,
                          workers: int = 1, market_only: bool = False) -> int:
    """Return an estimate of the peak resident memory of a run, in bytes.

    Each process holds the market and one replication at a time: its candidate
    order events (shared by all worlds), per-world flags, and per-world panels of
    per-user totals (users x days when a design's kind declares
    ``needs_user_days``). ``n_worlds`` defaults to the two truth worlds plus one
    per design. The estimate errs high (it assumes the peak rate all day long).
    Each world's per-pool tick tables, the first replication's traces, a
    switchback's block variance and every replication's saved records count
    too: they grow with the horizon and with ``study.reps``. Measured at 2,000
    users over 3,650 days (``benchmarks/_peak.py``): 35-45% high.
    ``market_only`` counts only building the market (``spillgauge check``, and
    the local process of a run on a Dask cluster).
    """
    from spillgauge.designs.registry import kind_of

    n_users = scenario.users.count if scenario.users.file is None else \
        _count_lines(scenario.users.file)
    edges = n_users * scenario.graph.mean_degree / 2 if scenario.graph.model != "none" else 0
    if market_only:
        return int(_BASE_BYTES + n_users * _BYTES_PER_USER + edges * _BYTES_PER_EDGE_BUILD)
    worlds = 2 + len(scenario.designs) if n_worlds is None else n_worlds
    candidates = _expected_candidates(scenario)
    per_process = (_BASE_BYTES + n_users * _BYTES_PER_USER + edges * _BYTES_PER_EDGE
                   + candidates * (_BYTES_PER_CANDIDATE + worlds * _BYTES_PER_CANDIDATE_WORLD)
                   + worlds * n_users * _BYTES_PER_USER_WORLD)
    if any(kind_of(spec).needs_user_days for spec in scenario.designs):
        per_process += worlds * n_users * scenario.calendar.days * _BYTES_PER_USER_DAY_WORLD
    ticks = scenario.calendar.n_ticks
    per_process += worlds * scenario.pools.count * ticks * _BYTES_PER_POOL_TICK_WORLD
    per_process += _variance_bytes(scenario)
    # The parent holds every replication's records to the end, and the traces of the first.
    held = (scenario.study.reps * (_BYTES_PER_REPLICATION + len(scenario.designs)
                                   * _BYTES_PER_REPLICATION_DESIGN)
            + worlds * _TRACED_POOLS * ticks * _BYTES_PER_TRACED_TICK)
    return int(per_process * max(1, workers) + held)


def _variance_bytes(scenario: Scenario) -> float:
    """Return the analysis variance's peak: sums over clusters, a switchback's block-ticks.

    The CR2 variance of a cluster design takes a few floats per cluster; a switchback's
    takes its (unit, block, tick) arrays and the low-rank factors of its working model,
    at most one set per pool-tick (blocks x block ticks = units x ticks, units <= pools).
    No dense (clusters x clusters) array is formed.
    """
    from spillgauge.designs.registry import kind_of

    largest = max((kind_of(spec).analysis_clusters(spec, scenario) for spec in scenario.designs),
                  default=0)
    if not largest:
        return 0.0
    block_ticks = scenario.pools.count * scenario.calendar.n_ticks
    return _BYTES_PER_CLUSTER * largest + _BYTES_PER_BLOCK_TICK * block_ticks


def available_memory_bytes() -> int | None:
    """Return the memory available to new processes (``MemAvailable``), or None if unknown."""
    try:
        with open("/proc/meminfo", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def check_memory(scenario: Scenario, *, workers: int = 1, n_worlds: int | None = None,
                 available: int | None = None, market_only: bool = False) -> int:
    """Refuse a run whose estimated memory exceeds what the machine has; return the estimate.

    Raises
    ------
    MemoryLimitError
        With the estimate, what is available, and how to make the run fit.
    """
    need = estimate_memory_bytes(scenario, n_worlds=n_worlds, workers=workers,
                                 market_only=market_only)
    have = available_memory_bytes() if available is None else available
    if have is not None and need > have:
        gib = 2**30
        per = need / max(1, workers) / gib
        raise MemoryLimitError(
            f"this run needs about {need / gib:.1f} GiB ({per:.1f} GiB per process x {workers} "
            f"process{'es' if workers != 1 else ''}) but {have / gib:.1f} GiB is available; "
            "use fewer --workers, fewer users (users.count), a shorter horizon "
            "(calendar.days) or fewer designs, or run on a Dask cluster (--scheduler)")
    return need
