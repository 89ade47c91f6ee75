"""One synthetic experiment with its truth: the data a real run of the design would give.

The experiment is replication 0 of a study with the same seed: the same market,
the design's own assignment draw and the replication's demand stream, shared with
the two counterfactual worlds (all control, all treated) that give its truth.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd

from spillgauge.experiment.assignment import (
    ASSIGNMENT_REPLICATION,
    Assignment,
    assign_design,
)
from spillgauge.experiment.folder import write_assignment
from spillgauge.files import dumps, write_atomic
from spillgauge.panel import OutcomePanel
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import DEMAND, stream
from spillgauge.statistics.truth import ReplicationTruth, replication_truth

__all__ = ["SimulatedExperiment", "simulate_experiment", "write_experiment", "ORDERS",
           "POOL_ORDERS", "TRUTH"]

ORDERS, POOL_ORDERS, STOCK, TRUTH = "orders.csv", "pool_orders.csv", "stock.csv", "truth.json"
_OUTCOME_WORDS = {"orders": "fulfilled orders", "revenue": "revenue (fulfilled orders x basket "
                  "value)", "conversion": "conversion (1 when the user had a fulfilled order)"}


@dataclass(frozen=True, eq=False)
class SimulatedExperiment:
    """A synthetic experiment: its assignment, its world's outcomes and its truth.

    Attributes
    ----------
    assignment : Assignment
    panel : OutcomePanel
        The design's world.
    truth : ReplicationTruth
        The two counterfactual worlds of the same replication (GTE, their means).
    """

    assignment: Assignment
    panel: OutcomePanel
    truth: ReplicationTruth


def simulate_experiment(scenario: Scenario, design: str | DesignSpec, *,
                        seed: int | None = None, start: str | datetime | None = None
                        ) -> SimulatedExperiment:
    """Simulate one experiment of a design in the scenario's market, with its truth.

    Parameters are those of :func:`~spillgauge.experiment.assignment.assign_design`;
    the world is replication 0 of ``spillgauge run --seed seed``, bit for bit.
    The truth and the world are in the scenario's ``study.outcome`` (orders,
    conversion or revenue), which the assignment keeps for ``analyze``.
    """
    from spillgauge.market.build import build_market
    from spillgauge.worlds.engine import simulate_worlds

    seed = scenario.study.seed if seed is None else seed
    assignment = assign_design(scenario, design, seed=seed, start=start)
    market = build_market(scenario, assignment.seed)
    n_users, n_ticks = market.n_users, scenario.calendar.n_ticks
    schedules = [AssignmentSchedule.fixed(n_users=n_users, n_ticks=n_ticks, is_treated=False),
                 AssignmentSchedule.fixed(n_users=n_users, n_ticks=n_ticks, is_treated=True),
                 assignment.schedule]
    rng = np.random.default_rng(stream(assignment.seed, ASSIGNMENT_REPLICATION, DEMAND))
    control, treated, world = simulate_worlds(market, schedules, rng=rng)
    return SimulatedExperiment(assignment=assignment, panel=world,
                               truth=replication_truth(control, treated))


def _dates(assignment: Assignment) -> np.ndarray:
    days = np.datetime64(assignment.start.date(), "D") + np.arange(assignment.days)
    return days.astype(str)


def write_experiment(experiment: SimulatedExperiment, out: str | Path) -> list[Path]:
    """Write the assignment folder, ``orders.csv``, ``stock.csv``, ``truth.json``.

    ``orders.csv`` has one row per user and day (``user_id, pool_id, date,
    orders``: fulfilled orders; with the outcome revenue, ``revenue``: their
    value). When the design's arms change over time, ``pool_orders.csv`` adds the
    orders of each pool's users per tick (``pool_id, date, hour, orders``, and
    ``revenue`` or ``conversions``: users whose first fulfilled order fell in the
    tick), which its estimator reads. ``stock.csv`` has one row per pool and day:
    orders placed, fulfilled and lost by its users, and the stock left at the end
    of the day.
    """
    out = Path(out)
    written = write_assignment(experiment.assignment, out)
    assignment, panel = experiment.assignment, experiment.panel
    dates = _dates(assignment)
    n_users, n_days = panel.fulfilled.shape
    orders = pd.DataFrame({
        "user_id": np.repeat(assignment.user_ids, n_days),
        "pool_id": np.repeat(assignment.pool_ids[assignment.pool_of_user], n_days),
        "date": np.tile(dates, n_users), "orders": panel.fulfilled.ravel()})
    outcome = assignment.outcome
    if outcome == "revenue":  # each value written in full, so analyze reads the same floats
        orders["revenue"] = panel.outcome_days.ravel()
    write_atomic(out / ORDERS, orders.to_csv(index=False))
    written.append(out / ORDERS)
    if not assignment.schedule.is_static:
        n_pools, n_ticks = panel.pool_fulfilled.shape
        hours = np.arange(n_ticks) * assignment.tick_hours
        frame = pd.DataFrame({"pool_id": np.repeat(assignment.pool_ids, n_ticks),
                              "date": np.tile(dates[hours // 24], n_pools),
                              "hour": np.tile(hours % 24, n_pools),
                              "orders": panel.pool_fulfilled.ravel()})
        if outcome == "revenue":
            frame["revenue"] = panel.pool_outcome.ravel()
        elif outcome == "conversion":
            frame["conversions"] = panel.pool_outcome.ravel().astype(np.int64)
        write_atomic(out / POOL_ORDERS, frame.to_csv(index=False))
        written.append(out / POOL_ORDERS)
    ticks_per_day = 24 // assignment.tick_hours
    n_pools = panel.n_pools

    def daily(table: np.ndarray) -> np.ndarray:
        return table.reshape(n_pools, n_days, ticks_per_day).sum(axis=2).ravel()

    stock = pd.DataFrame({
        "pool_id": np.repeat(assignment.pool_ids, n_days), "date": np.tile(dates, n_pools),
        "orders_placed": daily(panel.pool_demanded),
        "orders_fulfilled": daily(panel.pool_fulfilled),
        "orders_lost": daily(panel.pool_lost),
        "stock_end_of_day": panel.pool_stock[:, ticks_per_day - 1::ticks_per_day].ravel()})
    write_atomic(out / STOCK, stock.to_csv(index=False))
    truth = {"scenario": assignment.scenario_name, "design": assignment.spec.label,
             "seed": assignment.seed, "replication": ASSIGNMENT_REPLICATION,
             "outcome": outcome,
             "note": f"per user over the horizon: {_OUTCOME_WORDS[outcome]} when everyone is "
                     "treated (treated_mean) and when no one is (control_mean); gte is their "
                     "difference",
             **experiment.truth.to_dict()}
    write_atomic(out / TRUTH, dumps(truth))
    return [*written, out / STOCK, out / TRUTH]
