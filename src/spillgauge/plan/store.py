"""A plan's results folder: each finished replication saved as it completes, so a plan resumes.

The plan keeps its replications the way a study does
(:class:`~spillgauge.study.store.ResultsFolder`: a fingerprint file, an
append-only log flushed line by line, a torn last line skipped, records of
another plan refused by line), in files of its own (``plan_study.json``,
``plan_replications.jsonl``) so a study and a plan may share a folder. The
fingerprint adds the durations to the scenario and seed: a replication's
record holds its analysis at those durations. Without ``--resume`` a plan
starts afresh in its folder, as it always did. Every number is saved exactly
(JSON keeps a float's shortest repr; infinities are written as text), so a
resumed plan gives the same numbers as one that was never interrupted.
"""

from __future__ import annotations

import math
from pathlib import Path

from spillgauge.plan.replication import PlanReplication, PrefixRun
from spillgauge.scenario import Scenario
from spillgauge.statistics.truth import ReplicationTruth
from spillgauge.study.store import ResultsFolder, scenario_fingerprint

__all__ = ["PlanFolder", "plan_record", "plan_from_record"]

_RUN_FIELDS = ("point", "standard_error", "ci_low", "ci_high", "degrees_of_freedom")


def _code(value: float) -> float | str | None:
    """Return a float as JSON keeps it exactly: NaN as null, infinities as text."""
    value = float(value)
    if math.isnan(value):
        return None
    return value if math.isfinite(value) else ("inf" if value > 0 else "-inf")


def _number(value: object) -> float:
    """Return the float saved by :func:`_code`."""
    if value is None:
        return math.nan
    if value in ("inf", "-inf"):
        return float(value)
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ValueError(f"not a saved number: {value!r}")
    return float(value)


def plan_record(result: PlanReplication) -> dict:
    """Return one plan replication as plain JSON data (durations as string keys).

    >>> r = PlanReplication(replication=0, n_users=2, truths={},
    ...     runs={"user": {7: PrefixRun(1.0, 0.5, 0.0, 2.0, math.inf, 2)}},
    ...     history_correlation={7: math.nan})
    >>> back = plan_from_record(plan_record(r))
    >>> back.runs == r.runs, math.isnan(back.history_correlation[7])
    (True, True)
    """
    return {
        "replication": result.replication, "n_users": result.n_users,
        "truths": {str(d): {k: _code(v) for k, v in t.to_dict().items()}
                   for d, t in result.truths.items()},
        "runs": {label: {str(d): [*(_code(getattr(run, f)) for f in _RUN_FIELDS),
                                  run.n_units, run.note] for d, run in by_days.items()}
                 for label, by_days in result.runs.items()},
        "history_correlation": {str(d): _code(v) for d, v in result.history_correlation.items()},
        "strata_within_share": {str(d): {s: _code(v) for s, v in shares.items()}
                                for d, shares in result.strata_within_share.items()},
    }


def plan_from_record(record: dict) -> PlanReplication:
    """Rebuild a plan replication saved with :func:`plan_record` (ValueError when it is not one)."""
    runs = {}
    for label, by_days in record["runs"].items():
        runs[label] = {}
        for d, values in by_days.items():
            *numbers, n_units, note = values
            if len(numbers) != len(_RUN_FIELDS) or not isinstance(note, str):
                raise ValueError("a run is not (point, se, ci_low, ci_high, df, n_units, note)")
            runs[label][int(d)] = PrefixRun(*(_number(v) for v in numbers),
                                            n_units=int(n_units), note=note)
    return PlanReplication(
        replication=int(record["replication"]), n_users=int(record["n_users"]),
        truths={int(d): ReplicationTruth(**{k: _number(v) for k, v in t.items()})
                for d, t in record["truths"].items()},
        runs=runs,
        history_correlation={int(d): _number(v)
                             for d, v in record["history_correlation"].items()},
        strata_within_share={int(d): {str(s): _number(v) for s, v in shares.items()}
                             for d, shares in record.get("strata_within_share", {}).items()})


class PlanFolder(ResultsFolder):
    """A plan's results folder (see the module's description)."""

    study_file = "plan_study.json"
    log_file = "plan_replications.jsonl"
    final_file = "plan.json"

    def __init__(self, path: str | Path, scenario: Scenario, seed: int,
                 days: tuple[int, ...]) -> None:
        self._days = [int(d) for d in days]
        super().__init__(path, scenario, seed)

    def make_fingerprint(self, scenario: Scenario, seed: int) -> dict:
        return {**scenario_fingerprint(scenario, seed), "days": self._days}

    def open(self, *, resume: bool) -> list[PlanReplication]:
        """Prepare the folder; return the replications already saved when resuming.

        Without ``resume`` a plan starts afresh, replacing an earlier plan's files
        in the folder (as a plan always did); with it, the saved plan must be this
        one (same scenario, seed, durations and level), or it is refused by name.
        """
        if resume:
            return super().open(resume=True)
        from spillgauge.files import dumps, write_atomic

        self.path.mkdir(parents=True, exist_ok=True)
        write_atomic(self.path / self.study_file, dumps(self.fingerprint))
        write_atomic(self.log_path, "")
        return []

    def encode(self, result: PlanReplication) -> dict:
        return plan_record(result)

    def decode(self, record: dict) -> PlanReplication:
        return plan_from_record(record)
