"""One replication: the two truth worlds and every design's world on the same random numbers."""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from spillgauge.designs.registry import kind_of
from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.estimators.estimate import Estimate, InterferenceDiagnostic, LaunchDiagnostic
from spillgauge.estimators.relative import relative_effect
from spillgauge.files import nan_from_null
from spillgauge.market.build import Market, build_market
from spillgauge.panel import OutcomePanel
from spillgauge.scenario import Scenario
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import (
    ASSIGNMENT,
    DEMAND,
    RANDOMIZATION_TEST,
    design_key,
    stream,
)
from spillgauge.statistics.truth import ReplicationTruth, replication_truth
from spillgauge.worlds.engine import simulate_worlds

__all__ = [
    "SAMPLE_POOLS",
    "DesignRun",
    "ReplicationResult",
    "result_from_record",
    "result_to_record",
    "run_replication",
    "simulate_replication_worlds",
]

SAMPLE_POOLS = 4  # pools whose stock paths are kept for the report

# How an estimate is saved in replications.jsonl and replications.csv (the file format's names).
_SAVED_FIELDS = (("estimate", "point"), ("se", "standard_error"), ("ci_low", "ci_low"),
                 ("ci_high", "ci_high"), ("n_units", "n_units"))
_SAVED_DIAGNOSTIC = ("delta", "delta_se", "statistic", "rejects", "rejects_chebyshev")
_SAVED_CONTROL = ("control_mean", "control_mean_se", "control_covariance", "confidence",
                  "degrees_of_freedom")
_SAVED_RELATIVE = ("estimate_relative", "se_relative", "ci_low_relative", "ci_high_relative")


@dataclass(frozen=True, slots=True)
class DesignRun:
    """One design in one replication: its estimate and how many units it randomized.

    Parameters
    ----------
    estimate : Estimate
        The design's estimate of its estimand (the test of interference's
        statistics ride on ``estimate.diagnostic``).
    n_randomized : int
        Units x periods the design's schedule randomized.
    note : str
        The estimator's warning when the input was degenerate (e.g. every unit in
        one arm), else empty.
    truth : float
        The truth of the design's estimand in this replication when it is not the
        GTE (a launch's ATT or effect on its launched pools); NaN otherwise.
    left_out_effect : float
        A launch's true effect on the users it left out (NaN otherwise).
    truth_relative : float
        A launch's truth as a share of its users' all-control mean outcome over the
        estimand's window (NaN otherwise; randomized designs use the relative GTE).
    """

    estimate: Estimate
    n_randomized: int
    note: str = ""
    truth: float = float("nan")
    left_out_effect: float = float("nan")
    truth_relative: float = float("nan")

    def to_record(self) -> dict:
        """Return the run as saved in ``replications.jsonl`` (NaN kept; the writer nulls it)."""
        record = {saved: getattr(self.estimate, name) for saved, name in _SAVED_FIELDS}
        record["n_randomized"] = self.n_randomized
        if self.note:
            record["note"] = self.note
        if not np.isnan(self.truth):  # only launches: randomized designs' records are unchanged
            record["truth"] = self.truth
            record["left_out_effect"] = self.left_out_effect
            record["truth_relative"] = self.truth_relative
        diagnostic = self.estimate.diagnostic
        if isinstance(diagnostic, InterferenceDiagnostic):
            record.update({k: float(getattr(diagnostic, k)) for k in _SAVED_DIAGNOSTIC})
        elif isinstance(diagnostic, LaunchDiagnostic):  # a launch's balance and fit
            record.update({k: float(getattr(diagnostic, k)) for k in LaunchDiagnostic.__slots__})
        if not np.isnan(self.estimate.randomization_p_value):  # only designs that ask for it
            record["randomization_p_value"] = self.estimate.randomization_p_value
        if not np.isnan(self.estimate.control_mean):  # estimators that give a control mean
            record.update({name: getattr(self.estimate, name) for name in _SAVED_CONTROL})
            record.update(zip(_SAVED_RELATIVE, relative_effect(self.estimate)))
        return record

    @classmethod
    def from_record(cls, record: dict) -> DesignRun:
        """Rebuild a run saved with :meth:`to_record`."""
        note = record.get("note", "")
        values = {k: nan_from_null(v) for k, v in record.items() if k != "note"}
        diagnostic = None
        if "statistic" in values:
            diagnostic = InterferenceDiagnostic(
                user_arm_point=float("nan"), cluster_arm_point=values["estimate"],
                delta=values["delta"], delta_se=values["delta_se"],
                statistic=values["statistic"], p_value=float("nan"),
                rejects=bool(values["rejects"]),
                rejects_chebyshev=bool(values["rejects_chebyshev"]))
        elif "pre_rmspe" in values:
            diagnostic = LaunchDiagnostic(**{k: values[k] for k in LaunchDiagnostic.__slots__})
        estimate = Estimate(**{name: values[saved] for saved, name in _SAVED_FIELDS},
                            method="", diagnostic=diagnostic,
                            randomization_p_value=values.get("randomization_p_value",
                                                             float("nan")),
                            **{name: values.get(name, float("nan")) for name in _SAVED_CONTROL})
        return cls(estimate=estimate, n_randomized=values.get("n_randomized", values["n_units"]),
                   note=note, truth=values.get("truth", float("nan")),
                   left_out_effect=values.get("left_out_effect", float("nan")),
                   truth_relative=values.get("truth_relative", float("nan")))


@dataclass(frozen=True, slots=True)
class ReplicationResult:
    """What one replication leaves behind: the truth, and one :class:`DesignRun` per design.

    ``runs`` maps a design label to its run. ``traces`` (first replication only)
    holds small arrays for the report: sample pools' stock and lost orders per
    world, and each switchback's effect by ticks since a switch.
    """

    replication: int
    truth: ReplicationTruth
    runs: dict[str, DesignRun]
    traces: dict = field(default_factory=dict)

    def rows(self) -> list[dict]:
        """Return one flat record per design (for replications.csv)."""
        rows = []
        for label, run in self.runs.items():
            record = run.to_record()
            rows.append({"replication": self.replication, "label": label,
                         **{saved: record[saved] for saved, _ in _SAVED_FIELDS},
                         "gte": self.truth.gte,
                         "truth": record.get("truth", self.truth.gte),
                         **{k: record.get(k, float("nan")) for k in
                            ("estimate_relative", "ci_low_relative", "ci_high_relative")},
                         "gte_relative": self.truth.gte_relative,
                         "truth_relative": record.get("truth_relative", self.truth.gte_relative)})
        return rows


def _switch_profile(panel: OutcomePanel, schedule: AssignmentSchedule) -> np.ndarray:
    """Return treated minus control mean orders per user-tick, by ticks since the block start.

    Only blocks whose arm differs from the unit's previous block count, so the
    profile shows how the effect builds up after a switch (and where carryover
    from the previous arm fades).
    """
    lengths = schedule.period_lengths()
    block = int(lengths.max())
    users = np.bincount(schedule.unit_of_user, minlength=schedule.n_units).astype(float)
    pool_to_unit = np.zeros(panel.n_pools, dtype=np.int64)
    pool_to_unit[panel.pool_of_user] = schedule.unit_of_user
    unit_tick = np.zeros((schedule.n_units, panel.n_ticks))
    np.add.at(unit_tick, pool_to_unit, panel.pool_fulfilled)
    per_user = unit_tick / np.maximum(users, 1)[:, None]
    sums = np.zeros((2, block))
    counts = np.zeros((2, block))
    treated = schedule.is_treated
    for k, (start, length) in enumerate(zip(schedule.period_start_ticks, lengths)):
        switched = treated[:, k] != treated[:, k - 1] if k else np.ones(schedule.n_units, bool)
        for arm in (0, 1):
            rows = switched & (treated[:, k] == bool(arm))
            if rows.any():
                sums[arm, :length] += per_user[rows, start:start + length].sum(axis=0)
                counts[arm, :length] += rows.sum()
    with np.errstate(invalid="ignore", divide="ignore"):
        return sums[1] / counts[1] - sums[0] / counts[0]


def _pool_traces(panel: OutcomePanel, pools: np.ndarray) -> dict:
    return {"stock": panel.pool_stock[pools].tolist(), "lost": panel.pool_lost[pools].tolist(),
            "demanded": panel.pool_demanded[pools].tolist()}


def simulate_replication_worlds(market: Market, designs: tuple, seed: int, replication: int,
                                *, user_days: bool) -> tuple[list, list]:
    """Draw every design's schedule on its own stream and simulate the replication's worlds.

    Returns the schedules and panels in the same order: all control, all treated,
    then one per design. The study and the plan both run replications through here,
    so the same (seed, replication) gives them the same worlds.
    """
    from spillgauge.study.compose import draw_design_schedule

    n_users, n_ticks = market.n_users, market.n_ticks
    schedules = [AssignmentSchedule.fixed(n_users=n_users, n_ticks=n_ticks, is_treated=False),
                 AssignmentSchedule.fixed(n_users=n_users, n_ticks=n_ticks, is_treated=True)]
    for spec in designs:
        rng = np.random.default_rng(stream(seed, replication, ASSIGNMENT, design_key(spec.label)))
        schedules.append(draw_design_schedule(market, spec, rng=rng))
    demand_rng = np.random.default_rng(stream(seed, replication, DEMAND))
    return schedules, simulate_worlds(market, schedules, rng=demand_rng, user_days=user_days)


def run_replication(scenario: Scenario, seed: int, replication: int, *,
                    market: Market | None = None, keep_traces: bool | None = None,
                    designs: tuple | None = None, user_days: bool = False
                    ) -> ReplicationResult:
    """Run one replication of a study.

    Parameters
    ----------
    scenario : Scenario
    seed : int
        Study seed; the replication's streams derive from (seed, replication).
    replication : int
    market : Market, optional
        The scenario's market (built and cached when not given).
    keep_traces : bool, optional
        Keep the small arrays the report draws; by default only for replication 0.
    designs : tuple of DesignSpec, optional
        Designs to run; by default the scenario's. ``()`` runs only the truth worlds.
    user_days : bool, default False
        Keep each user's orders per day in every world (for a caller that looks at
        days); the worlds also keep them when a design's kind declares
        ``needs_user_days``. The numbers are the same either way.
    """
    designs = scenario.designs if designs is None else tuple(designs)
    if designs:  # estimators (and scipy.stats) load only when a design is run
        from spillgauge.study.compose import estimate_design
    market = market if market is not None else build_market(scenario, seed)
    user_days = user_days or any(kind_of(spec).needs_user_days for spec in designs)
    schedules, panels = simulate_replication_worlds(market, designs, seed, replication,
                                                    user_days=user_days)
    truth = replication_truth(panels[0], panels[1])
    confidence = 1.0 - scenario.study.alpha
    runs = {}
    for spec, schedule, panel in zip(designs, schedules[2:], panels[2:]):
        # its own stream: a design's re-draws leave every other stream's numbers unchanged
        test_rng = np.random.default_rng(stream(seed, replication, RANDOMIZATION_TEST,
                                                design_key(spec.label)))
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", DegenerateEstimateWarning)
            estimate = estimate_design(spec, panel, schedule, confidence=confidence,
                                       tick_hours=scenario.calendar.tick_hours, rng=test_rng)
        notes = [str(w.message) for w in caught
                 if issubclass(w.category, DegenerateEstimateWarning)]
        kind = kind_of(spec)
        own_truth = left_out = own_relative = float("nan")
        if kind.estimand != "gte":  # a launch: its own world against the all-control world
            own_truth, left_out = kind.truth(spec, schedule, panel, panels[0])
            level = kind.truth_control_mean(spec, schedule, panels[0])
            own_relative = own_truth / level if level > 0 else float("nan")
        runs[spec.label] = DesignRun(estimate=estimate,
                                     n_randomized=schedule.n_units * schedule.n_periods,
                                     note=notes[0] if notes else "", truth=own_truth,
                                     left_out_effect=left_out, truth_relative=own_relative)
    keep = replication == 0 if keep_traces is None else keep_traces
    traces = {}
    if keep:
        demand = panels[0].pool_demanded.sum(axis=1)
        pools = np.sort(np.argsort(-demand, kind="stable")[:SAMPLE_POOLS])
        traces["pools"] = pools.tolist()
        traces["worlds"] = {"all control": _pool_traces(panels[0], pools),
                            "all treated": _pool_traces(panels[1], pools)}
        for spec, panel in zip(designs, panels[2:]):
            traces["worlds"][spec.label] = _pool_traces(panel, pools)
    profiles = {}
    for spec, schedule, panel in zip(designs, schedules[2:], panels[2:]):
        if kind_of(spec).keeps_switch_profile:
            profile = _switch_profile(panel, schedule)
            profiles[spec.label] = profile.tolist()
    traces["switch_profiles"] = profiles
    return ReplicationResult(replication=replication, truth=truth, runs=runs, traces=traces)


def result_to_record(result: ReplicationResult) -> dict:
    """Return a replication result as plain data (``files.dumps`` writes NaN as null)."""
    return {"replication": result.replication, "truth": result.truth.to_dict(),
            "estimates": {label: run.to_record() for label, run in result.runs.items()},
            "traces": result.traces}


def result_from_record(record: dict) -> ReplicationResult:
    """Rebuild a replication result saved with :func:`result_to_record`."""
    runs = {label: DesignRun.from_record(values) for label, values in record["estimates"].items()}
    truth = ReplicationTruth(**{k: nan_from_null(v) for k, v in record["truth"].items()})
    return ReplicationResult(replication=int(record["replication"]), truth=truth, runs=runs,
                             traces=record.get("traces", {}))
