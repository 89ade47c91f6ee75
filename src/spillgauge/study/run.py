"""Run a study: every replication's truth worlds and design worlds, saved as they finish.

Replications are independent. They run serially, on local processes
(``workers``) or on a Dask cluster (``scheduler``; see
:mod:`spillgauge.study.executors`); every stream derives from (seed,
replication), so the same seed gives the same bits whatever runs them. Each
finished replication is appended to ``replications.jsonl`` (flushed and
fsynced) in the results folder, so an interrupted study resumes and loses
nothing; the final files are written atomically.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

from spillgauge.files import folder_lock
from spillgauge.market.build import build_market
from spillgauge.scenario import Scenario
from spillgauge.statistics.truth import TruthSummary, summarise_truth
from spillgauge.study.executors import default_workers, run_replications
from spillgauge.study.replication import ReplicationResult
from spillgauge.study.resources import check_memory
from spillgauge.study.result import StudyResult, summarise_study
from spillgauge.study.store import ResultsFolder

__all__ = ["run_study", "run_truth"]

Progress = Callable[[int, int], None]


def run_truth(scenario: Scenario, *, reps: int | None = None, seed: int | None = None,
              workers: int | None = 1, scheduler: str | None = None,
              progress: Progress | None = None) -> TruthSummary:
    """Run only the two counterfactual worlds of each replication and summarise the truth."""
    reps = scenario.study.reps if reps is None else int(reps)
    seed = scenario.study.seed if seed is None else int(seed)
    scenario = replace(scenario, study=replace(scenario.study, reps=reps, seed=seed))
    if scheduler is None:
        check_memory(scenario, n_worlds=2,
                     workers=default_workers() if workers is None else max(1, workers))
    else:
        check_memory(scenario, market_only=True)  # this process still builds the market
    build_market(scenario, seed)
    truths = []

    def finished(result: ReplicationResult) -> None:
        truths.append(result)
        if progress:
            progress(len(truths), reps)

    run_replications(scenario, seed, list(range(reps)), workers=workers, scheduler=scheduler,
                      finished=finished, designs=())
    truths.sort(key=lambda r: r.replication)
    return summarise_truth([r.truth for r in truths])


def run_study(scenario: Scenario, *, reps: int | None = None, seed: int | None = None,
              workers: int | None = 1, scheduler: str | None = None,
              out: str | Path | None = None, resume: bool = False,
              progress: Progress | None = None) -> StudyResult:
    """Run a study: every replication's truth worlds and design worlds, then the metrics.

    Parameters
    ----------
    scenario : Scenario
    reps, seed : int, optional
        Override ``study.reps`` and ``study.seed``.
    workers : int, optional
        Local processes; 1 runs in this process, ``None`` uses every core.
    scheduler : str, optional
        Address of a Dask distributed scheduler (needs ``spillgauge[dask]``).
    out : path, optional
        Results folder: finished replications are saved there as they complete.
    resume : bool
        Continue from the replications already saved in ``out``.
    progress : callable, optional
        Called as ``progress(done, total)`` after each replication.

    Returns
    -------
    StudyResult
    """
    reps = scenario.study.reps if reps is None else int(reps)
    seed = scenario.study.seed if seed is None else int(seed)
    scenario = replace(scenario, study=replace(scenario.study, reps=reps, seed=seed))
    if scheduler is None:
        check_memory(scenario, workers=default_workers() if workers is None else max(1, workers))
    else:
        check_memory(scenario, market_only=True)  # this process still builds the market
    if out is None:
        return _run_study(scenario, seed, reps, workers, scheduler, None, resume, progress)
    with folder_lock(out):  # a second run into the same folder is refused by name
        folder = ResultsFolder(out, scenario, seed)
        return _run_study(scenario, seed, reps, workers, scheduler, folder, resume, progress)


def _run_study(scenario: Scenario, seed: int, reps: int, workers: int | None,
               scheduler: str | None, folder: ResultsFolder | None, resume: bool,
               progress: Progress | None) -> StudyResult:
    done: dict[int, ReplicationResult] = {}
    if folder is not None:
        done = {r.replication: r for r in folder.open(resume=resume) if r.replication < reps}
    from spillgauge.study.compose import prepare_market
    from spillgauge.study.market_summary import summarise_market

    market = build_market(scenario, seed)
    prepare_market(market, scenario.designs)
    market_summary = summarise_market(market)
    todo = [r for r in range(reps) if r not in done]
    total = reps
    if progress:
        progress(len(done), total)

    def finished(result: ReplicationResult) -> None:
        done[result.replication] = result
        if folder is not None:
            folder.append(result)
        if progress:
            progress(len(done), total)

    run_replications(scenario, seed, todo, workers=workers, scheduler=scheduler,
                      finished=finished)
    result = summarise_study(scenario, seed, list(done.values()), market_summary)
    if folder is not None:
        folder.finish(result)
    return result
