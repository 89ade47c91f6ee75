"""The study: replications x designs -> metrics -> recommendation, saved as it goes.

Replications are independent. They run serially, on local processes
(``workers``) or on a Dask cluster (``scheduler``); every stream derives from
(seed, replication), so the same seed gives the same bits whatever runs them.
Each finished replication is appended to ``replications.jsonl`` (flushed and
fsynced) in the results folder, so an interrupted study resumes and loses
nothing; the final files are written atomically.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from spillgauge.designs.registry import kind_of
from spillgauge.evaluation.replication import ReplicationResult, run_replication
from spillgauge.evaluation.resources import check_memory
from spillgauge.evaluation.store import ResultsFolder, json_safe
from spillgauge.evaluation.truth import TruthSummary, summarise_truth
from spillgauge.model.market import build_market
from spillgauge.scenario import Scenario
from spillgauge.scenario.reading import scenario_to_dict

__all__ = ["StudyResult", "run_study", "run_truth", "summarise_study", "default_workers"]

Progress = Callable[[int, int], None]


def default_workers() -> int:
    """Return the number of local processes used by default: the machine's cores."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - platforms without affinity
        return max(1, os.cpu_count() or 1)


@dataclass(frozen=True, eq=False)
class StudyResult:
    """Everything a study produced.

    Attributes
    ----------
    scenario : Scenario
    seed, reps : int
    truth : TruthSummary
    metrics : dict of str to DesignMetrics
        Per design label, in scenario order.
    recommendation : Recommendation
    replications : list of ReplicationResult
        Sorted by replication index.
    """

    scenario: Scenario
    seed: int
    reps: int
    truth: TruthSummary
    metrics: dict
    recommendation: object
    replications: list = field(repr=False)
    market_summary: dict = field(default_factory=dict, repr=False)

    def designs_frame(self):
        """Return the design table (one row per design, all metrics) as a DataFrame."""
        import pandas as pd

        return pd.DataFrame(self.summary()["designs"])

    def replications_frame(self):
        """Return one row per replication x design as a DataFrame."""
        import pandas as pd

        rows = [row for rep in self.replications for row in rep.rows()]
        return pd.DataFrame(rows, columns=["replication", "label", "estimate", "se", "ci_low",
                                           "ci_high", "n_units", "gte"])

    def design_kind(self, label: str):
        """Return the registered kind of the design with this label."""
        return kind_of(self.scenario.design(label))

    def switch_profiles(self) -> dict:
        """Return each switchback's mean effect per user-tick by ticks since a switch."""
        out = {}
        for rep in self.replications:
            for label, profile in rep.traces.get("switch_profiles", {}).items():
                values = np.array([np.nan if v is None else v for v in profile], dtype=float)
                out.setdefault(label, []).append(values)
        return {label: np.nanmean(np.stack(rows), axis=0) if rows else np.array([])
                for label, rows in out.items()}

    def interference_test(self, label: str) -> dict:
        """Summarise a test-of-interference design over the replications.

        Returns the share of replications where the user half and the cluster
        half disagree (``rejection_rate``, normal threshold; and
        ``chebyshev_rejection_rate``, threshold 1/sqrt(alpha)), each with its
        binomial Monte Carlo SE, and the mean difference ``delta`` (user half
        minus cluster half, orders per user) with its Monte Carlo SE. Its metrics
        in the design table are those of the cluster half's GTE estimate.
        """
        rows = [r.estimates[label] for r in self.replications]
        statistic = np.array([row.get("statistic", np.nan) for row in rows], dtype=float)
        usable = np.isfinite(statistic)
        n = int(usable.sum())
        out = {"n_reps": n}
        for key, name in (("rejects", "rejection_rate"),
                          ("rejects_chebyshev", "chebyshev_rejection_rate")):
            flags = np.array([row[key] for row in rows], dtype=float)[usable]
            rate = float(flags.mean()) if n else float("nan")
            out[name] = rate
            out[f"{name}_se"] = float(np.sqrt(rate * (1 - rate) / n)) if n else float("nan")
        delta = np.array([row["delta"] for row in rows], dtype=float)[usable]
        out["mean_delta"] = float(delta.mean()) if n else float("nan")
        out["mean_delta_se"] = float(delta.std(ddof=1) / np.sqrt(n)) if n > 1 else float("nan")
        return out

    def summary(self) -> dict:
        """Return the content of ``summary.json``."""
        from spillgauge.evaluation.plan import describe_unit, estimator_name

        designs = []
        for spec in self.scenario.designs:
            m = self.metrics[spec.label]
            entry = {"label": spec.label, "kind": spec.kind,
                     "estimator": estimator_name(spec), "unit": describe_unit(spec),
                     **json_safe(m.to_dict())}
            if not kind_of(spec).is_recommendable:
                entry["interference_test"] = json_safe(self.interference_test(spec.label))
            designs.append(entry)
        truth = json_safe(self.truth.to_dict())
        return {"scenario": self.scenario.name, "seed": self.seed, "reps": self.reps,
                "truth": truth, "designs": designs,
                "recommendation": {"label": self.recommendation.label,
                                   "reason": self.recommendation.reason,
                                   "is_trustworthy": self.recommendation.is_trustworthy},
                "market": self.market_summary,
                "scenario_settings": scenario_to_dict(self.scenario)}


def summarise_study(scenario: Scenario, seed: int, results: list[ReplicationResult],
                    market_summary: dict | None = None) -> StudyResult:
    """Turn finished replications into metrics and a recommendation."""
    from spillgauge.evaluation.metrics import design_metrics
    from spillgauge.evaluation.plan import describe_unit
    from spillgauge.evaluation.recommend import Candidate, recommend

    results = sorted(results, key=lambda r: r.replication)
    truth = summarise_truth([r.truth for r in results])
    gte = np.array([r.truth.gte for r in results])
    alpha = scenario.study.alpha
    metrics = {}
    candidates = []
    for spec in scenario.designs:
        rows = [r.estimates[spec.label] for r in results]
        column = {k: np.array([row[k] for row in rows], dtype=float)
                  for k in ("estimate", "se", "ci_low", "ci_high")}
        m = design_metrics(column["estimate"], column["se"], column["ci_low"],
                           column["ci_high"], gte, alpha=alpha)
        metrics[spec.label] = m
        randomized = np.array([row.get("n_randomized", row["n_units"]) for row in rows],
                              dtype=float)
        kind = kind_of(spec)
        if not kind.is_recommendable:
            continue  # a diagnostic: it is reported, never recommended as a unit
        candidates.append(Candidate(label=spec.label, is_user_level=kind.is_user_level,
                                    unit=describe_unit(spec),
                                    n_units=float(np.nanmean(randomized)), metrics=m,
                                    params=_design_params(spec)))
    if candidates:
        advice = recommend(candidates, gte=truth.gte, gte_se=truth.gte_se, alpha=alpha)
    else:
        from spillgauge.evaluation.recommend import Recommendation

        advice = Recommendation(label=None, reason="The scenario has only tests of "
                                "interference: add user, cluster or switchback designs to "
                                "get a recommended randomization unit.",
                                is_trustworthy=False, trusted=(), ranking=())
    return StudyResult(scenario=scenario, seed=seed, reps=len(results), truth=truth,
                       metrics=metrics, recommendation=advice, replications=results,
                       market_summary=market_summary or {})


def _design_params(spec) -> dict:
    """Return the design's parameters worth naming: those off their default, plus its identity."""
    kind = kind_of(spec)
    return {key.name: spec.params[key.name] for key in kind.keys
            if key.name in kind.shown_keys or spec.params[key.name] != key.default}


def _run_task(scenario: Scenario, seed: int, replication: int,
              designs: tuple | None = None) -> ReplicationResult:
    """Run one replication in a worker (the market comes from the worker's cache)."""
    return run_replication(scenario, seed, replication, designs=designs)


def _run_replications(scenario: Scenario, seed: int, todo: list[int], *, workers: int | None,
                      scheduler: str | None, finished: Callable[[ReplicationResult], None],
                      designs: tuple | None = None) -> None:
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


def run_truth(scenario: Scenario, *, reps: int | None = None, seed: int | None = None,
              workers: int | None = 1, scheduler: str | None = None,
              progress: Progress | None = None) -> TruthSummary:
    """Run only the two counterfactual worlds of each replication and summarise the truth."""
    reps = scenario.study.reps if reps is None else int(reps)
    seed = scenario.study.seed if seed is None else int(seed)
    if scheduler is None:
        check_memory(scenario, n_worlds=2,
                     workers=default_workers() if workers is None else max(1, workers))
    build_market(scenario, seed)
    truths = []

    def finished(result: ReplicationResult) -> None:
        truths.append(result)
        if progress:
            progress(len(truths), reps)

    _run_replications(scenario, seed, list(range(reps)), workers=workers, scheduler=scheduler,
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
    folder = ResultsFolder(out, scenario, seed) if out is not None else None
    done: dict[int, ReplicationResult] = {}
    if folder is not None:
        done = {r.replication: r for r in folder.open(resume=resume) if r.replication < reps}
    from spillgauge.evaluation.market_summary import summarise_market
    from spillgauge.evaluation.plan import prepare_market

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

    _run_replications(scenario, seed, todo, workers=workers, scheduler=scheduler,
                      finished=finished)
    result = summarise_study(scenario, seed, list(done.values()), market_summary)
    if folder is not None:
        folder.finish(result)
    return result


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
