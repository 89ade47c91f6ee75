"""The first days of a world: an outcome panel and a schedule cut to a prefix of the horizon.

A plan analyses every duration it reports as a prefix of the same simulated
worlds: the experiment that stops after ``days`` days saw exactly the first
``days`` days of the world that ran for the whole horizon (nothing after the
stop can reach back), so one study gives every duration on common random numbers.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["first_days_of_panel", "first_ticks_of_schedule", "ticks_per_day"]


def ticks_per_day(panel: OutcomePanel) -> int:
    """Return the ticks in one day of a panel (its ticks over its days)."""
    if panel.n_days == 0 or panel.n_ticks % panel.n_days:
        raise ValueError(f"panel has {panel.n_ticks} ticks over {panel.n_days} days; "
                         "a whole number of ticks per day is needed")
    return panel.n_ticks // panel.n_days


def first_days_of_panel(panel: OutcomePanel, days: int) -> OutcomePanel:
    """Return the panel of the first ``days`` days (the pre-period history is kept).

    Examples
    --------
    >>> p = OutcomePanel.from_arrays(fulfilled=np.array([[1, 2, 3], [4, 5, 6]]))
    >>> q = first_days_of_panel(p, 2)
    >>> q.user_fulfilled().tolist(), q.n_ticks
    ([3.0, 9.0], 2)
    """
    if not 1 <= days <= panel.n_days:
        raise ValueError(f"days must be in [1, {panel.n_days}]; got {days}")
    if days == panel.n_days:
        return panel
    ticks = days * ticks_per_day(panel)
    return OutcomePanel(fulfilled=panel.fulfilled[:, :days], demanded=panel.demanded[:, :days],
                        pool_of_user=panel.pool_of_user, history=panel.history,
                        pool_fulfilled=panel.pool_fulfilled[:, :ticks],
                        pool_demanded=panel.pool_demanded[:, :ticks],
                        pool_lost=panel.pool_lost[:, :ticks],
                        pool_stock=panel.pool_stock[:, :ticks], tick_hours=panel.tick_hours,
                        outcome_days=panel.outcome_days[:, :days], pre_outcome=panel.pre_outcome,
                        pool_outcome=panel.pool_outcome[:, :ticks])


def first_ticks_of_schedule(schedule: AssignmentSchedule, n_ticks: int) -> AssignmentSchedule:
    """Return the schedule of the first ``n_ticks`` ticks: the periods that started before.

    The last period kept ends at the cut. Everything else (units, exposure
    incidences, clusters, the treated probability) is unchanged.

    Examples
    --------
    >>> s = AssignmentSchedule(unit_of_user=np.zeros(2, dtype=int),
    ...     is_treated=np.array([[True, False, True]]), period_start_ticks=[0, 4, 8],
    ...     n_ticks=12, unit_kind="market", randomization="bernoulli")
    >>> c = first_ticks_of_schedule(s, 6)
    >>> c.is_treated.tolist(), c.period_start_ticks.tolist(), c.n_ticks
    ([[True, False]], [0, 4], 6)
    """
    if not 1 <= n_ticks <= schedule.n_ticks:
        raise ValueError(f"n_ticks must be in [1, {schedule.n_ticks}]; got {n_ticks}")
    if n_ticks == schedule.n_ticks:
        return schedule
    n_periods = int(np.searchsorted(schedule.period_start_ticks, n_ticks, side="left"))
    return dataclasses.replace(schedule, is_treated=schedule.is_treated[:, :n_periods],
                               period_start_ticks=schedule.period_start_ticks[:n_periods],
                               n_ticks=n_ticks)
