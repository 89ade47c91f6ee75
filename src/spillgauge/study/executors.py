"""Executors: run replications serially, on local processes or on a Dask cluster.

Whatever runs them, each replication's streams derive from (seed, replication),
so the results are the same bits; ``finished`` is called in completion order.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from concurrent.futures import ProcessPoolExecutor, as_completed

from spillgauge.market.build import build_market
from spillgauge.scenario import Scenario
from spillgauge.study.replication import ReplicationResult, run_replication

__all__ = ["default_workers", "run_replications"]


def default_workers() -> int:
    """Return the number of local processes used by default: the machine's cores."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - platforms without affinity
        return max(1, os.cpu_count() or 1)


def _run_task(scenario: Scenario, seed: int, replication: int,
              designs: tuple | None = None) -> ReplicationResult:
    """Run one replication in a worker (the market comes from the worker's cache)."""
    return run_replication(scenario, seed, replication, designs=designs)


def run_replications(scenario: Scenario, seed: int, todo: list[int], *, workers: int | None,
                     scheduler: str | None, finished: Callable[[ReplicationResult], None],
                     designs: tuple | None = None) -> None:
    """Run the replications in ``todo`` and hand each result to ``finished`` as it completes.

    ``designs=()`` runs only the truth worlds; ``scheduler`` is a Dask
    scheduler's address, ``workers`` the number of local processes (``None``:
    every core; 1: this process).
    """
    if scheduler is not None:
        _run_on_dask(scheduler, scenario, seed, todo, finished, designs)
        return
    n_workers = default_workers() if workers is None else max(1, int(workers))
    if n_workers == 1 or len(todo) <= 1:
        market = build_market(scenario, seed)
        for r in todo:
            finished(run_replication(scenario, seed, r, market=market, designs=designs))
        return
    import multiprocessing

    context = multiprocessing.get_context("fork" if hasattr(os, "fork") else "spawn")
    pool = ProcessPoolExecutor(max_workers=min(n_workers, len(todo)), mp_context=context)
    try:
        futures = [pool.submit(_run_task, scenario, seed, r, designs) for r in todo]
        for future in as_completed(futures):
            finished(future.result())
    except BaseException:
        pool.shutdown(wait=False, cancel_futures=True)  # an interrupt stops queued work at once
        raise
    pool.shutdown()


def _run_on_dask(address: str, scenario: Scenario, seed: int, todo: list[int],
                 finished: Callable[[ReplicationResult], None], designs: tuple | None) -> None:
    try:
        from dask.distributed import Client
        from dask.distributed import as_completed as dask_completed
    except ImportError as exc:  # pragma: no cover - depends on the environment
        raise RuntimeError("--scheduler needs Dask: pip install 'spillgauge[dask]'") from exc
    with Client(address) as client:
        futures = [client.submit(_run_task, scenario, seed, r, designs, pure=False) for r in todo]
        for future in dask_completed(futures):
            finished(future.result())
