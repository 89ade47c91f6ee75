"""User-level estimators for static schedules: difference in means and CUPED.

Both compare users by the arm their assignment unit was in, so they suit
user-level (Bernoulli or complete) randomization; run on a cluster or pool
schedule they give the naive user-level analysis, with a standard error that
ignores the clustering.
"""

from __future__ import annotations

import numpy as np

from spillgauge.estimators._inference import (
    build_estimate,
    check_common_inputs,
    check_static,
    degenerate_estimate,
    neyman_variance,
)
from spillgauge.estimators.estimate import Estimate
from spillgauge.estimators.relative import with_control_mean
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["difference_in_means", "regression_adjusted_difference"]


def _check_inputs(panel: OutcomePanel, schedule: AssignmentSchedule, confidence: float,
                  method: str) -> float:
    confidence = check_common_inputs(panel, schedule, confidence, method)
    check_static(schedule, method)
    return confidence


def _neyman_difference(values: np.ndarray, is_treated: np.ndarray, *, confidence: float,
                       method: str) -> Estimate:
    """Difference of arm means of ``values`` with the Neyman variance."""
    n_users = int(values.size)
    treated, control = values[is_treated], values[~is_treated]
    if treated.size == 0 or control.size == 0:
        arm = "treated" if treated.size == 0 else "control"
        return degenerate_estimate(method, f"the {arm} arm has no users", n_units=n_users)
    point = float(treated.mean() - control.mean())
    if treated.size < 2 or control.size < 2:
        return degenerate_estimate(method, "an arm has a single user, so its variance is "
                                   "undefined", n_units=n_users, point=point)
    estimate = build_estimate(point, neyman_variance(treated, control), confidence=confidence,
                              method=method, n_units=n_users)
    return with_control_mean(estimate, control.mean(), np.var(control, ddof=1) / control.size)


def difference_in_means(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                        confidence: float = 0.95) -> Estimate:
    """Estimate the GTE by the treated minus the control mean of users' fulfilled orders.

    Parameters
    ----------
    panel : OutcomePanel
        Outcomes of the world; each user's outcome is ``panel.user_outcome()``,
        fulfilled orders over the whole horizon.
    schedule : AssignmentSchedule
        A static schedule (one period) for the same users; a user is treated when
        ``schedule.user_is_treated()`` says so.
    confidence : float, default 0.95
        Level of the confidence interval, in (0, 1).

    Returns
    -------
    Estimate
        ``method="difference_in_means"``; ``n_units`` is the number of users.

    Raises
    ------
    ValueError
        If panel and schedule hold different numbers of users, the schedule has
        more than one period, or ``confidence`` is outside (0, 1).

    Warns
    -----
    DegenerateEstimateWarning
        If an arm is empty (every field NaN) or has a single user (point kept,
        standard error and interval NaN).

    Notes
    -----
    ``point = mean(Y | treated) - mean(Y | control)`` with the Neyman standard
    error ``sqrt(s1^2 / n1 + s0^2 / n0)`` (sample variances, ``ddof=1``), which
    is conservative under complete randomization (Neyman 1923; Imbens & Rubin
    2015, ch. 6). The interval is ``point +/- z_{(1+confidence)/2} * se``.
    ``point / se`` is Welch's t statistic.

    Examples
    --------
    >>> panel = OutcomePanel.from_arrays(fulfilled=np.arange(1, 7))
    >>> schedule = AssignmentSchedule(
    ...     unit_of_user=np.arange(6), is_treated=np.array([[0], [0], [0], [1], [1], [1]], bool),
    ...     period_start_ticks=[0], n_ticks=1, treated_probability=0.5, randomization="complete")
    >>> est = difference_in_means(panel, schedule)
    >>> est.point, round(est.standard_error ** 2, 6), est.n_units
    (3.0, 0.666667, 6)
    """
    method = "difference_in_means"
    confidence = _check_inputs(panel, schedule, confidence, method)
    return _neyman_difference(panel.user_outcome(), schedule.user_is_treated(),
                              confidence=confidence, method=method)


def regression_adjusted_difference(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                                   confidence: float = 0.95) -> Estimate:
    """Estimate the GTE by a difference in means adjusted for pre-period orders (CUPED).

    Parameters
    ----------
    panel : OutcomePanel
        Outcomes of the world; the outcome is ``panel.user_outcome()`` and the
        covariate is ``panel.pre_outcome``, the outcome's pre-period analogue
        (orders before the experiment by default).
    schedule : AssignmentSchedule
        A static schedule (one period) for the same users.
    confidence : float, default 0.95
        Level of the confidence interval, in (0, 1).

    Returns
    -------
    Estimate
        ``method="regression_adjusted_difference"``; ``n_units`` is the number of
        users. When the history has no variance (for example a scenario without a
        pre-period) there is nothing to adjust for and the result equals
        :func:`difference_in_means` except for its method name.

    Raises
    ------
    ValueError
        As :func:`difference_in_means`.

    Warns
    -----
    DegenerateEstimateWarning
        As :func:`difference_in_means`.

    Notes
    -----
    CUPED (Deng, Xu, Kohavi & Walker 2013): with the covariate ``X = history``,

    ``theta = Cov(Y, X) / Var(X)``, pooled over both arms (the OLS slope of Y on X),

    ``Y_cv = Y - theta * (X - mean(X))``,

    and the estimate is the difference in means of ``Y_cv`` with the Neyman
    standard error of ``Y_cv``. Because X is measured before the experiment its
    arm means agree in expectation, and ``Var(Y_cv) = Var(Y) (1 - rho^2)`` with
    ``rho`` the correlation of Y and X. The standard error treats ``theta`` as
    known, as the paper does.

    Examples
    --------
    >>> panel = OutcomePanel.from_arrays(fulfilled=np.array([2, 4, 3, 6, 8, 7]),
    ...                                  history=np.array([1.0, 3.0, 2.0, 1.0, 3.0, 2.0]))
    >>> schedule = AssignmentSchedule(
    ...     unit_of_user=np.arange(6), is_treated=np.array([[0], [0], [0], [1], [1], [1]], bool),
    ...     period_start_ticks=[0], n_ticks=1, treated_probability=0.5, randomization="complete")
    >>> est = regression_adjusted_difference(panel, schedule)
    >>> est.point, round(est.standard_error, 6)
    (4.0, 0.0)
    """
    method = "regression_adjusted_difference"
    confidence = _check_inputs(panel, schedule, confidence, method)
    outcome = panel.user_outcome()
    history = np.asarray(panel.pre_outcome, dtype=float)
    if outcome.size and np.any(history != history[0]):
        centred = history - history.mean()
        theta = float(np.dot(centred, outcome - outcome.mean()) / np.dot(centred, centred))
        outcome = outcome - theta * centred
    return _neyman_difference(outcome, schedule.user_is_treated(), confidence=confidence,
                              method=method)
