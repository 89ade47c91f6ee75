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

__all__ = ["RANDOMIZATION_STATISTICS", "redraw_assignment", "randomization_p_value"]

# what the randomization test compares across re-draws: the estimate, or the estimate over its SE
RANDOMIZATION_STATISTICS = ("estimate", "studentized")


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
                          rng: np.random.Generator, statistic: str = "estimate",
                          **options: object) -> float:
    """Return Fisher's randomization p-value of "no effect on anyone" for an estimator.

    Under the sharp null every user's outcomes are the same whatever the
    assignment, so the panel stands for every re-drawn schedule; the p-value is
    ``(1 + #{|T_r| >= |T|}) / (1 + R)`` over ``R = draws`` re-draws of the
    design's own randomization (:func:`redraw_assignment`), counting re-draws
    without a statistic as not extreme (Fisher 1935; Imbens & Rubin 2015, ch. 5;
    Bojinov, Simchi-Levi & Zhao 2023 for switchbacks). NaN when the observed
    statistic is undefined.

    ``statistic`` chooses ``T``: ``"estimate"`` (the point estimate) or
    ``"studentized"`` (the point over its own standard error, re-computed for
    every re-draw). Both are exact under the sharp null. The studentized one
    also keeps its level asymptotically under the weak null of a zero average
    effect (Chung & Romano 2013; Wu & Ding 2021), and it follows the analytic
    t test world by world where the estimate's precision depends on the draw
    (a switchback with burn-in, whose burn-in hours rest on the blocks that did
    not switch).

    Raises
    ------
    ValueError
        If ``statistic`` is neither ``"estimate"`` nor ``"studentized"``.
    """
    check_rng(rng)
    if statistic not in RANDOMIZATION_STATISTICS:
        raise ValueError(f"statistic must be one of {', '.join(RANDOMIZATION_STATISTICS)}; "
                         f"got {statistic!r}")
    observed = _statistic(estimator(panel, schedule, **options), statistic)
    if not math.isfinite(observed):
        return math.nan
    extreme = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DegenerateEstimateWarning)
        for _ in range(int(draws)):
            value = _statistic(estimator(panel, redraw_assignment(schedule, rng=rng),
                                         **options), statistic)
            extreme += bool(math.isfinite(value) and abs(value) >= abs(observed) * (1 - 1e-12))
    return (1 + extreme) / (1 + int(draws))


def _statistic(estimate: Estimate, statistic: str) -> float:
    """Return the test statistic of an estimate: the point, or the point over its SE."""
    if statistic == "estimate":
        return estimate.point
    standard_error = estimate.standard_error
    if not (math.isfinite(standard_error) and standard_error > 0):
        return math.nan
    return estimate.point / standard_error
