"""Plan a test: power and minimum detectable effect of every design by duration, from one study.

:func:`plan_study` runs the scenario's replications once (the study's worlds,
on the study's random numbers) and analyses each design at every duration as
a prefix of those worlds (:mod:`spillgauge.plan.prefix`), so durations are
compared on common random numbers and a whole plan costs one study.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field, replace
from pathlib import Path

from spillgauge.designs.registry import kind_of
from spillgauge.errors import ScenarioError
from spillgauge.files import dumps, json_safe, write_atomic
from spillgauge.formatting import OUTCOME_UNITS
from spillgauge.market.build import build_market
from spillgauge.plan.answer import answer_cuped, answer_plan, answer_strata, answer_variants
from spillgauge.plan.replication import run_plan_replications
from spillgauge.plan.summary import cuped_rows, plan_rows
from spillgauge.scenario import Scenario
from spillgauge.study.compose import prepare_market

__all__ = ["PlanResult", "plan_study", "default_days", "parse_days", "write_plan",
           "PLAN_COLUMNS"]

# The columns of plan.csv, in order.
PLAN_COLUMNS = ("label", "kind", "days", "reps", "power", "power_se", "mde", "mde_relative",
                "bias", "bias_se", "coverage", "coverage_se", "sd", "rmse", "mean_se", "gte",
                "control_mean", "n_units", "effective_n", "trusted", "why_not_trusted")


def default_days(horizon_days: int) -> tuple[int, ...]:
    """Return whole weeks up to the horizon, and the horizon itself.

    >>> default_days(28), default_days(10), default_days(5)
    ((7, 14, 21, 28), (7, 10), (5,))
    """
    weeks = tuple(range(7, horizon_days, 7))
    return (*weeks, horizon_days)


def parse_days(text: str | Iterable[int] | None, horizon_days: int, *,
               field: str = "--days") -> tuple[int, ...]:
    """Return sorted unique durations in days, each in [1, horizon]; ScenarioError naming ``field``.

    >>> parse_days("14,7,28", 28)
    (7, 14, 28)
    """
    if text is None:
        return default_days(horizon_days)
    parts = text.split(",") if isinstance(text, str) else list(text)
    days = []
    for part in parts:
        try:
            value = int(str(part).strip())
        except ValueError:
            raise ScenarioError(field, "whole days separated by commas, e.g. 7,14,21",
                                text) from None
        if not 1 <= value <= horizon_days:
            raise ScenarioError(field, f"days in [1, calendar.days={horizon_days}]", value)
        days.append(value)
    if not days:
        raise ScenarioError(field, "at least one duration in days", text)
    return tuple(sorted(set(days)))


@dataclass(frozen=True, eq=False)
class PlanResult:
    """A plan: every design at every duration, and the answer.

    Attributes
    ----------
    scenario : Scenario
    seed, reps : int
    days : tuple of int
    power, alpha : float
        The target power and the tests' level.
    rows : list of dict
        One per design and duration, with the columns of :data:`PLAN_COLUMNS`
        (power is the measured rejection rate at the scenario's effect, ``power_se``
        its Monte Carlo SE; ``mde`` = (t critical + z of the power) x the root mean
        square of the design's standard errors, Bloom 1995; ``mde_relative`` as a
        share of the control mean; ``effective_n`` the users a user-level design
        would need for the same error variance).
    cuped : list of dict
        Per duration: ``rho`` between pre-period and experiment orders, the
        variance factor ``1 - rho^2`` of regression adjustment, and the variance
        share stratified randomization keeps (``strata_pre_period``,
        ``strata_pools``).
    """

    scenario: Scenario
    seed: int
    reps: int
    days: tuple[int, ...]
    power: float
    alpha: float
    rows: list[dict] = field(repr=False)
    cuped: list[dict] = field(repr=False)

    def frame(self):
        """Return the rows as a pandas DataFrame (the columns of ``plan.csv`` and a few more)."""
        import pandas as pd

        return pd.DataFrame(self.rows)

    def answer(self) -> str:
        """Return the plan's answer: the shortest duration, the design, or what is detectable."""
        outcome = self.scenario.study.outcome  # the MDE is in the study's outcome
        unit = "orders per user" if outcome == "orders" else OUTCOME_UNITS[outcome]
        text = answer_plan(self.rows, power=self.power, horizon_days=self.scenario.calendar.days,
                           unit=unit)
        variants = answer_variants(self.rows)
        cuped = answer_cuped(self.rows, self.cuped, power=self.power, alpha=self.alpha,
                             unit=unit, outcome=outcome)
        strata = answer_strata(self.rows, self.cuped, power=self.power, alpha=self.alpha,
                               unit=unit)
        return " ".join(part for part in (text, variants, cuped, strata) if part)

    def plot_power(self, ax=None):
        """Draw each design's power by duration on ``ax`` (a new figure when omitted)."""
        from spillgauge.plan.figures import plot_power_by_days

        return plot_power_by_days(self.rows, power=self.power, ax=ax)

    def plot_mde(self, ax=None):
        """Draw each design's minimum detectable effect by duration on ``ax``."""
        from spillgauge.plan.figures import plot_mde_by_days

        return plot_mde_by_days(self.rows, power=self.power, ax=ax)

    def to_dict(self) -> dict:
        """Return ``plan.json``'s content (NaN as null)."""
        return json_safe({"scenario": self.scenario.name, "seed": self.seed, "reps": self.reps,
                          "days": list(self.days), "power": self.power, "alpha": self.alpha,
                          "horizon_days": self.scenario.calendar.days,
                          "answer": self.answer(), "designs": self.rows,
                          "cuped": self.cuped})


def plan_study(scenario: Scenario, *, days: Iterable[int] | str | None = None,
               power: float = 0.8, alpha: float | None = None, reps: int | None = None,
               seed: int | None = None, workers: int | None = 1,
               progress: Callable[[int, int], None] | None = None,
               out: str | Path | None = None, resume: bool = False) -> PlanResult:
    """Plan a test: each design's power, MDE, bias, coverage and trust at each duration.

    Parameters
    ----------
    scenario : Scenario
    days : iterable of int or str, optional
        Durations in days, each at most ``calendar.days`` (default: whole weeks and
        the horizon); a string is read as comma-separated days.
    power : float, default 0.8
        Target power of the minimum detectable effect and of the answer.
    alpha : float, optional
        Level of the tests (default ``study.alpha``).
    reps, seed : int, optional
        Override ``study.reps`` and ``study.seed``.
    workers : int, optional
        Local processes (1: this process; ``None``: every core).
    progress : callable, optional
        Called as ``progress(done, total)``.
    out : path, optional
        Results folder: each finished replication is saved there as it completes
        (``plan_study.json``, ``plan_replications.jsonl``), under a lock on the folder.
    resume : bool
        Continue from the replications already saved in ``out`` (same scenario,
        seed, durations and level; ``reps`` and ``power`` may change). The numbers
        equal those of a plan that was never interrupted.

    Returns
    -------
    PlanResult
    """
    if not (isinstance(power, (int, float)) and 0 < power < 1):
        raise ScenarioError("--power", "a number in (0, 1)", power)
    alpha = scenario.study.alpha if alpha is None else alpha
    if not (isinstance(alpha, (int, float)) and 0 < alpha < 1):
        raise ScenarioError("--alpha", "a number in (0, 1)", alpha)
    reps = scenario.study.reps if reps is None else int(reps)
    if reps < 2:
        raise ScenarioError("--reps", "an int >= 2 (power needs replications)", reps)
    seed = scenario.study.seed if seed is None else int(seed)
    days = parse_days(days, scenario.calendar.days)
    # The plan sizes a randomized test: launches answer other questions than the GTE and
    # the test of interference is a diagnostic, so neither is planned (dropping them
    # leaves every other design's random numbers unchanged: streams are keyed by label).
    planned = tuple(spec for spec in scenario.designs
                    if kind_of(spec).is_randomized and kind_of(spec).is_recommendable)
    if not planned:
        raise ScenarioError("design", "at least one randomized design to plan (launches and "
                            "the test of interference are not planned)",
                            ", ".join(spec.label for spec in scenario.designs) or "none")
    scenario = replace(scenario, designs=planned,
                       study=replace(scenario.study, reps=reps, seed=seed, alpha=float(alpha)))
    if resume and out is None:
        raise ScenarioError("--resume", "given with a results folder (--out) to resume from",
                            "no folder")
    if out is None:
        results = _run(scenario, seed, reps, days, workers, progress, None, False)
    else:
        from spillgauge.files import folder_lock
        from spillgauge.plan.store import PlanFolder

        with folder_lock(out):  # a second plan into the same folder is refused by name
            folder = PlanFolder(out, scenario, seed, days)
            results = _run(scenario, seed, reps, days, workers, progress, folder, resume)
    rows = plan_rows(scenario, results, days, power=float(power), alpha=float(alpha))
    return PlanResult(scenario=scenario, seed=seed, reps=reps, days=days, power=float(power),
                      alpha=float(alpha), rows=rows, cuped=cuped_rows(results, days))


def _run(scenario: Scenario, seed: int, reps: int, days: tuple[int, ...],
         workers: int | None, progress, folder, resume: bool) -> list:
    done = folder.open(resume=resume) if folder is not None else []
    market = build_market(scenario, seed)
    prepare_market(market, scenario.designs)
    return run_plan_replications(scenario, seed, reps, days, market=market, workers=workers,
                                 progress=progress, done=done,
                                 save=folder.append if folder is not None else None)


def write_plan(plan: PlanResult, out: str | Path) -> list[Path]:
    """Write ``plan.csv`` and ``plan.json`` into ``out``; return their paths."""
    import csv
    import io

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=PLAN_COLUMNS, extrasaction="ignore",
                            lineterminator="\n")
    writer.writeheader()
    for row in plan.rows:
        writer.writerow({k: ("" if isinstance(v, float) and math.isnan(v) else v)
                         for k, v in row.items()})
    paths = [out / "plan.csv", out / "plan.json"]
    write_atomic(paths[0], buffer.getvalue())
    write_atomic(paths[1], dumps(plan.to_dict()) + "\n")
    return paths
