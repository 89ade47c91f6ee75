"""Executors: run replications serially, on local processes or on a Dask cluster.

Whatever runs them, each replication's streams derive from (seed, replication),
so the results are the same bits; ``finished`` is called in completion order.
"""

from __future__ import annotations

import os
import signal
import sys
import threading
import time
from collections.abc import Callable
from concurrent.futures import ProcessPoolExecutor, as_completed

from spillgauge.errors import ScenarioError
from spillgauge.market.build import build_market
from spillgauge.scenario import Scenario
from spillgauge.study.replication import ReplicationResult, run_replication

__all__ = ["default_workers", "run_replications", "run_on_processes"]

_CONNECT_TIMEOUT_S = 5.0  # a scheduler that does not answer in this time is reported


def default_workers() -> int:
    """Return the number of local processes used by default: the machine's cores."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - platforms without affinity
        return max(1, os.cpu_count() or 1)


_PARENT_POLL_S = 0.5  # how often a worker checks that the run that started it is alive


def _die_with_parent(parent: int) -> None:
    """Make this worker exit when ``parent`` (the run) dies, even by SIGKILL.

    On Linux the kernel sends SIGKILL at the parent's death (``PR_SET_PDEATHSIG``);
    everywhere a daemon thread also polls ``os.getppid()``, which changes when
    the worker is orphaned.
    """
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, signal.SIGKILL, 0, 0, 0)  # 1 = PR_SET_PDEATHSIG
        except (OSError, AttributeError):  # pragma: no cover - no libc: polling only
            pass
    if os.getppid() != parent:  # the parent died before the line above took effect
        os._exit(1)

    def watch() -> None:
        while os.getppid() == parent:
            time.sleep(_PARENT_POLL_S)
        os._exit(1)

    threading.Thread(target=watch, name="spillgauge-parent-watch", daemon=True).start()


def _start_worker(parent: int) -> None:
    """Leave Ctrl-C to the parent process, which stops the workers and reports once; die
    with the parent."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _die_with_parent(parent)


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
    run_on_processes(_run_task, [(scenario, seed, r, designs) for r in todo],
                     workers=n_workers, finished=finished)


def run_on_processes(task: Callable, arguments: list[tuple], *, workers: int,
                     finished: Callable) -> None:
    """Run ``task(*args)`` for each tuple on ``workers`` local processes; hand each result on.

    Workers ignore Ctrl-C (the parent stops them and reports once) and die with the
    parent; an interrupt or an error cancels the queued tasks and ends the running ones.
    """
    import multiprocessing

    context = multiprocessing.get_context("fork" if hasattr(os, "fork") else "spawn")
    pool = ProcessPoolExecutor(max_workers=min(workers, len(arguments)), mp_context=context,
                               initializer=_start_worker, initargs=(os.getpid(),))
    try:
        futures = [pool.submit(task, *args) for args in arguments]
        for future in as_completed(futures):
            finished(future.result())
    except BaseException:
        # An interrupt (or an error) stops the work at once: queued tasks are cancelled
        # and running ones abandoned; finished ones were handed over already.
        for process in list((getattr(pool, "_processes", None) or {}).values()):
            process.terminate()
        pool.shutdown(wait=False, cancel_futures=True)
        raise
    pool.shutdown()


def _connect(address: str):
    """Return a Dask client connected to ``address``, or a ScenarioError naming it."""
    timeout_s = _CONNECT_TIMEOUT_S
    try:
        from dask.distributed import Client
    except ImportError:
        raise ScenarioError("--scheduler", "used with Dask installed (pip install "
                            "'spillgauge[dask]')", address) from None
    try:
        return Client(address, timeout=timeout_s)
    except (OSError, ValueError, TypeError) as exc:  # refused, timed out, or not an address
        reason = (f"could not connect within {timeout_s:g} s" if isinstance(exc, OSError) else
                  f"not an address: {str(exc)[:80]}")
        raise ScenarioError("--scheduler", f"the address of a running Dask scheduler, e.g. "
                            f"tcp://127.0.0.1:8786 ({reason})", address) from None


def _run_on_dask(address: str, scenario: Scenario, seed: int, todo: list[int],
                 finished: Callable[[ReplicationResult], None], designs: tuple | None) -> None:
    with _connect(address) as client:
        from dask.distributed import as_completed as dask_completed

        futures = [client.submit(_run_task, scenario, seed, r, designs, pure=False) for r in todo]
        for future in dask_completed(futures):
            finished(future.result())
