"""Randomization inference: re-draw a schedule's own assignment under the sharp null (Fisher)."""

from __future__ import annotations

import dataclasses
import math
import warnings
from collections.abc import Callable

import numpy as np

from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.estimators.estimate import Estimate
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["redraw_assignment", "randomization_p_value"]


def redraw_assignment(schedule: AssignmentSchedule, *, rng: np.random.Generator
                      ) -> AssignmentSchedule:
    """Return the schedule with its assignment drawn again by the same randomization.

    ``"complete"`` permutes the units' rows of ``is_treated`` (the same number of
    treated units in every period, and a rollout's waves, kept), within each
    stratum when the schedule has strata (``stratum_of_unit``: blocked
    randomization keeps each stratum's treated count); ``"bernoulli"``
    draws every unit-period afresh with ``treated_probability`` (a switchback's
    blocks, Bojinov, Simchi-Levi & Zhao 2023). Everything else is kept.

    Raises
    ------
    ValueError
        For a ``"fixed"`` schedule (nothing was randomized) or a test of
        interference's (its two-stage split is not re-drawn here).

    Examples
    --------
    >>> s = AssignmentSchedule(unit_of_user=np.arange(4),
    ...     is_treated=np.array([[1], [1], [0], [0]], bool), period_start_ticks=[0],
    ...     n_ticks=1, treated_probability=0.5, randomization="complete")
    >>> int(redraw_assignment(s, rng=np.random.default_rng(0)).is_treated.sum())
    2
    """
    check_rng(rng)
    if schedule.is_cluster_arm is not None:
        raise ValueError("redraw_assignment does not re-draw a test of interference's split")
    if schedule.randomization == "complete" and schedule.stratum_of_unit is not None:
        strata = schedule.stratum_of_unit
        slots = np.argsort(strata, kind="stable")  # each stratum's units, in order
        drawn = np.lexsort((rng.random(schedule.n_units), strata))  # shuffled within stratum
        treated = np.empty_like(schedule.is_treated)
        treated[slots] = schedule.is_treated[drawn]
    elif schedule.randomization == "complete":
        treated = schedule.is_treated[rng.permutation(schedule.n_units)]
    elif schedule.randomization == "bernoulli":
        treated = rng.random(schedule.is_treated.shape) < schedule.treated_probability
    else:
        raise ValueError("redraw_assignment needs a randomized schedule ('complete' or "
                         f"'bernoulli'); got randomization={schedule.randomization!r}")
    return dataclasses.replace(schedule, is_treated=np.asarray(treated, dtype=bool))


def randomization_p_value(estimator: Callable[..., Estimate], panel: OutcomePanel,
                          schedule: AssignmentSchedule, *, draws: int = 999,
                          rng: np.random.Generator, **options: object) -> float:
    """Return Fisher's randomization p-value of "no effect on anyone" for an estimator.

    Under the sharp null every user's outcomes are the same whatever the
    assignment, so the panel stands for every re-drawn schedule; the p-value is
    ``(1 + #{|point_r| >= |point|}) / (1 + R)`` over ``R = draws`` re-draws of the
    design's own randomization (:func:`redraw_assignment`), counting re-draws
    without an estimate as not extreme (Fisher 1935; Imbens & Rubin 2015, ch. 5;
    Bojinov, Simchi-Levi & Zhao 2023 for switchbacks). NaN when the observed
    estimate is undefined.
    """
    check_rng(rng)
    observed = estimator(panel, schedule, **options).point
    if not math.isfinite(observed):
        return math.nan
    extreme = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DegenerateEstimateWarning)
        for _ in range(int(draws)):
            point = estimator(panel, redraw_assignment(schedule, rng=rng), **options).point
            extreme += bool(math.isfinite(point) and abs(point) >= abs(observed) * (1 - 1e-12))
    return (1 + extreme) / (1 + int(draws))
