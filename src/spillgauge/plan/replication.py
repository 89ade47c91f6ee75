"""One replication of a plan: the study's worlds, analysed at every duration as prefixes.

The schedules are drawn from the same streams as :func:`spillgauge.study.run_study`
draws them (so the whole horizon gives the study's numbers), the worlds are
simulated once, and each duration cuts the truth worlds and every design's
world to its first days before the design's own analysis (the registry's
``analyse``) runs on the cut panel and schedule.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.market.build import Market, build_market
from spillgauge.plan.prefix import first_days_of_panel, first_ticks_of_schedule
from spillgauge.scenario import Scenario
from spillgauge.statistics.truth import ReplicationTruth, replication_truth
from spillgauge.study.compose import estimate_design
from spillgauge.study.executors import default_workers, run_on_processes
from spillgauge.study.replication import simulate_replication_worlds

__all__ = ["PlanReplication", "PrefixRun", "run_plan_replication", "run_plan_replications"]


@dataclass(frozen=True, slots=True)
class PrefixRun:
    """One design's analysis of the first days of its world in one replication."""

    point: float
    standard_error: float
    ci_low: float
    ci_high: float
    degrees_of_freedom: float
    n_units: int
    note: str = ""


@dataclass(frozen=True, slots=True)
class PlanReplication:
    """What one replication of a plan leaves behind.

    Parameters
    ----------
    replication : int
    n_users : int
    truths : dict of int to ReplicationTruth
        The truth of the first ``days`` days, per duration.
    runs : dict of str to dict of int to PrefixRun
        Per design label and duration.
    history_correlation : dict of int to float
        Per duration, the correlation over users between the outcome's pre-period
        analogue (``OutcomePanel.pre_outcome``: pre-period orders; revenue: their
        value; conversion: any pre-period order), the covariate CUPED adjusts for,
        and the study's outcome over the first days in the all-control world (NaN
        when either is constant).
    strata_within_share : dict of int to dict of str to float
        Per duration and strata source (``"pre_period"``, ``"pools"``: the user
        design's strata at their defaults), the share of the all-control world's
        variance of users' outcomes that lies within strata (NaN without variance).
    """

    replication: int
    n_users: int
    truths: dict[int, ReplicationTruth]
    runs: dict[str, dict[int, PrefixRun]]
    history_correlation: dict[int, float]
    strata_within_share: dict[int, dict[str, float]] = field(default_factory=dict)


def _within_share(strata: np.ndarray, y: np.ndarray) -> float:
    """Return ``sum_s (n_s/n) S_s^2 / S^2``: the variance a stratified draw keeps.

    With a fixed share in every stratum (proportional allocation) the stratified
    difference in means has about this share of the complete-randomization
    variance (Cochran 1977, *Sampling Techniques*, 5.6; Imbens & Rubin 2015, ch. 9).
    """
    total = float(np.var(y, ddof=1)) if y.size > 1 else 0.0
    if total <= 0:
        return float("nan")
    counts = np.bincount(strata).astype(float)
    means = np.bincount(strata, weights=y) / np.maximum(counts, 1)
    squares = np.bincount(strata, weights=(y - means[strata]) ** 2)
    within = squares / np.maximum(counts - 1, 1)
    return float(np.sum(counts / y.size * within) / total)


def _plan_strata(market: Market) -> dict[str, np.ndarray]:
    """Return each user's stratum under the user design's two strata sources, at defaults."""
    from spillgauge.designs.registry import make_design_spec
    from spillgauge.designs.user_level import market_strata

    sources = ("pre_period", "pools") if np.ptp(np.asarray(market.history)) > 0 else ("pools",)
    return {source: market_strata(market, make_design_spec("user", {"strata": source}))
            for source in sources}


def _correlation(x: np.ndarray, y: np.ndarray) -> float:
    if x.size < 2 or np.ptp(x) == 0 or np.ptp(y) == 0:
        return float("nan")
    return float(np.corrcoef(x, y)[0, 1])


def run_plan_replication(scenario: Scenario, seed: int, replication: int, days: tuple[int, ...],
                         *, market: Market | None = None) -> PlanReplication:
    """Run one replication and analyse each design at every duration in ``days``."""
    market = market if market is not None else build_market(scenario, seed)
    n_users = market.n_users
    schedules, panels = simulate_replication_worlds(market, scenario.designs, seed, replication,
                                                    user_days=True)  # prefixes cut days
    confidence = 1.0 - scenario.study.alpha
    tick_hours = scenario.calendar.tick_hours
    ticks_per_day = 24 // tick_hours
    truths, correlations, within = {}, {}, {}
    strata = _plan_strata(market)
    runs: dict[str, dict[int, PrefixRun]] = {spec.label: {} for spec in scenario.designs}
    for d in days:
        control = first_days_of_panel(panels[0], d)
        truths[d] = replication_truth(control, first_days_of_panel(panels[1], d))
        outcome = control.user_outcome()  # orders: user_fulfilled() itself, bit for bit
        correlations[d] = _correlation(np.asarray(control.pre_outcome, dtype=float), outcome)
        within[d] = {source: _within_share(codes, outcome) for source, codes in strata.items()}
        for spec, schedule, panel in zip(scenario.designs, schedules[2:], panels[2:]):
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", DegenerateEstimateWarning)
                try:
                    estimate = estimate_design(
                        spec, first_days_of_panel(panel, d),
                        first_ticks_of_schedule(schedule, d * ticks_per_day),
                        confidence=confidence, tick_hours=tick_hours,
                        rng=None)  # a plan reads intervals only: no randomization test
                except ValueError as exc:  # a design that cannot be analysed this early
                    runs[spec.label][d] = PrefixRun(*(float("nan"),) * 5, n_units=0,
                                                    note=str(exc))
                    continue
            notes = [str(w.message) for w in caught
                     if issubclass(w.category, DegenerateEstimateWarning)]
            runs[spec.label][d] = PrefixRun(
                point=float(estimate.point), standard_error=float(estimate.standard_error),
                ci_low=float(estimate.ci_low), ci_high=float(estimate.ci_high),
                degrees_of_freedom=float(estimate.degrees_of_freedom),
                n_units=int(estimate.n_units), note=notes[0] if notes else "")
    return PlanReplication(replication=replication, n_users=n_users, truths=truths, runs=runs,
                           history_correlation=correlations, strata_within_share=within)


def _run_task(scenario: Scenario, seed: int, replication: int, days: tuple[int, ...]
              ) -> PlanReplication:
    return run_plan_replication(scenario, seed, replication, days)


def run_plan_replications(scenario: Scenario, seed: int, reps: int, days: tuple[int, ...], *,
                          market: Market, workers: int | None = 1,
                          progress: Callable[[int, int], None] | None = None,
                          done: list[PlanReplication] | None = None,
                          save: Callable[[PlanReplication], None] | None = None
                          ) -> list[PlanReplication]:
    """Run ``reps`` replications serially or on local processes; return them in order.

    ``done`` holds replications already finished (a resumed plan): only the
    others run. ``save`` is called with each replication as it finishes.
    """
    n_workers = default_workers() if workers is None else max(1, workers)
    results: list[PlanReplication] = [r for r in (done or []) if r.replication < reps]
    todo = sorted(set(range(reps)) - {r.replication for r in results})

    def finished(result: PlanReplication) -> None:
        results.append(result)
        if save:
            save(result)
        if progress:
            progress(len(results), reps)

    if progress:
        progress(len(results), reps)
    if n_workers == 1 or len(todo) <= 1:
        for r in todo:
            finished(run_plan_replication(scenario, seed, r, days, market=market))
    else:
        run_on_processes(_run_task, [(scenario, seed, r, days) for r in todo],
                         workers=n_workers, finished=finished)
    return sorted(results, key=lambda r: r.replication)
