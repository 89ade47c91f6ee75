"""Estimators for stratified (blocked) user-level randomization.

A stratified design treats a fixed share of users within each stratum (groups
fixed before the draw: pre-period order quantiles, or stock pools). Its
estimate is the stratum-size-weighted average of the within-stratum
differences in means, with the Neyman variance summed over strata.
"""

from __future__ import annotations

import numpy as np

from spillgauge.estimators._inference import (
    build_estimate,
    check_common_inputs,
    check_static,
    degenerate_estimate,
    satterthwaite_df,
)
from spillgauge.estimators.estimate import Estimate
from spillgauge.estimators.relative import with_control_mean
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["stratified_difference_in_means", "stratified_regression_adjusted_difference",
           "user_strata"]


def user_strata(schedule: AssignmentSchedule) -> np.ndarray:
    """Return each user's stratum, shape ``(n_users,)``, as consecutive codes from 0.

    A schedule without strata is one stratum.

    >>> s = AssignmentSchedule(unit_of_user=np.arange(4), is_treated=np.ones((4, 1), bool),
    ...     period_start_ticks=[0], n_ticks=1, stratum_of_unit=np.array([7, 3, 7, 3]))
    >>> user_strata(s).tolist()
    [1, 0, 1, 0]
    """
    if schedule.stratum_of_unit is None:
        return np.zeros(schedule.n_users, dtype=np.int64)
    codes = np.asarray(schedule.stratum_of_unit)[schedule.unit_of_user]
    return np.unique(codes, return_inverse=True)[1].astype(np.int64)


def _stratified_neyman(values: np.ndarray, is_treated: np.ndarray, strata: np.ndarray, *,
                       confidence: float, method: str) -> Estimate:
    """Weighted within-stratum differences of ``values`` with the summed Neyman variance."""
    n_users = int(values.size)
    if n_users == 0:
        return degenerate_estimate(method, "there are no users", n_units=0)
    n_strata = int(strata.max()) + 1
    group = strata * 2 + is_treated.astype(np.int64)  # (stratum, arm) cells
    n = np.bincount(group, minlength=2 * n_strata).reshape(n_strata, 2).astype(float)
    total = np.bincount(group, weights=values, minlength=2 * n_strata).reshape(n_strata, 2)
    if np.any(n == 0):
        stratum = int(np.flatnonzero((n == 0).any(axis=1))[0])
        return degenerate_estimate(method, f"stratum {stratum} has an empty arm",
                                   n_units=n_users)
    mean = total / n
    weight = n.sum(axis=1) / n_users
    point = float(weight @ (mean[:, 1] - mean[:, 0]))
    if np.any(n < 2):
        return degenerate_estimate(method, "a stratum has a single user in an arm, so its "
                                   "variance is undefined", n_units=n_users, point=point)
    squares = np.bincount(group, weights=(values - mean.ravel()[group]) ** 2,
                          minlength=2 * n_strata).reshape(n_strata, 2)
    parts = weight[:, None] ** 2 * squares / (n - 1) / n  # each (stratum, arm) cell's share
    variance = float(parts.sum())
    df = (satterthwaite_df(list(zip(parts.ravel().tolist(), (n - 1).ravel().tolist())))
          if variance > 0 else None)
    estimate = build_estimate(point, variance, confidence=confidence, method=method,
                              n_units=n_users, df=df)
    # the control mean sum_s w_s mean_0s, its variance sum_s w_s^2 s_0s^2 / n_0s, and
    # Cov(effect, control mean) = -that variance (strata and arms are independent)
    return with_control_mean(estimate, float(weight @ mean[:, 0]), float(parts[:, 0].sum()))


def _check_inputs(panel: OutcomePanel, schedule: AssignmentSchedule, confidence: float,
                  method: str) -> float:
    confidence = check_common_inputs(panel, schedule, confidence, method)
    check_static(schedule, method)
    return confidence


def stratified_difference_in_means(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                                   confidence: float = 0.95) -> Estimate:
    """Estimate the GTE by the stratum-weighted difference in means of users' fulfilled orders.

    Parameters
    ----------
    panel : OutcomePanel
        Outcomes of the world; each user's outcome is ``panel.user_outcome()``
        (fulfilled orders over the horizon unless the study names another outcome).
    schedule : AssignmentSchedule
        A static schedule; ``schedule.stratum_of_unit`` gives the strata (none:
        one stratum, and the result is :func:`difference_in_means`).
    confidence : float, default 0.95
        Level of the confidence interval, in (0, 1).

    Returns
    -------
    Estimate
        ``method="stratified_difference_in_means"``; ``n_units`` is the number of users.

    Raises
    ------
    ValueError
        If panel and schedule hold different numbers of users, the schedule has
        more than one period, or ``confidence`` is outside (0, 1).

    Warns
    -----
    DegenerateEstimateWarning
        If a stratum has an empty arm (every field NaN) or a single user in an
        arm (point kept, standard error and interval NaN).

    Notes
    -----
    With ``n_s`` users in stratum ``s`` of ``n``, ``n_1s`` treated and ``n_0s``
    control, ``point = sum_s (n_s / n) (mean_1s - mean_0s)`` and
    ``var = sum_s (n_s / n)^2 (s_1s^2 / n_1s + s_0s^2 / n_0s)`` (sample
    variances, ``ddof=1``): the Neyman variance of a stratified randomized
    experiment, conservative when effects vary within strata (Imbens & Rubin
    2015, ch. 9; the same form is the post-stratification variance of
    Miratrix, Sekhon & Yu 2013, JRSS-B 75(2)). The interval is
    ``point +/- t_{(1+confidence)/2, df} * se`` with Satterthwaite's degrees of
    freedom of the sum of the cells' variance parts ``v_sa = w_s^2 s_sa^2 / n_sa``,
    ``df = (sum v)^2 / sum (v_sa^2 / (n_sa - 1))`` (Satterthwaite 1946; Welch
    1947): strata with few users per arm leave the variance estimate noisy, and
    a normal critical value would under-cover (with many users per arm the t
    quantile is the normal one).

    Examples
    --------
    Two strata of four users, two treated in each; differences 2 and 6:

    >>> panel = OutcomePanel.from_arrays(fulfilled=np.array([1, 2, 3, 4, 10, 11, 16, 17]))
    >>> schedule = AssignmentSchedule(unit_of_user=np.arange(8),
    ...     is_treated=np.array([[0], [0], [1], [1], [0], [0], [1], [1]], bool),
    ...     period_start_ticks=[0], n_ticks=1, treated_probability=0.5,
    ...     randomization="complete", stratum_of_unit=np.array([0, 0, 0, 0, 1, 1, 1, 1]))
    >>> est = stratified_difference_in_means(panel, schedule)
    >>> est.point, round(est.standard_error ** 2, 6)
    (4.0, 0.25)
    """
    method = "stratified_difference_in_means"
    confidence = _check_inputs(panel, schedule, confidence, method)
    return _stratified_neyman(panel.user_outcome(), schedule.user_is_treated(),
                              user_strata(schedule), confidence=confidence, method=method)


def stratified_regression_adjusted_difference(panel: OutcomePanel,
                                              schedule: AssignmentSchedule, *,
                                              confidence: float = 0.95) -> Estimate:
    """Estimate the GTE by the stratified difference in means after CUPED within strata.

    As :func:`stratified_difference_in_means`, on the outcome adjusted for its
    pre-period analogue ``X = panel.pre_outcome`` (pre-period orders by default):
    ``Y_cv = Y - theta * (X - mean_s(X))`` with ``theta`` the pooled
    within-stratum slope (the OLS slope of Y on X with stratum fixed effects),
    the regression adjustment of Deng, Xu, Kohavi & Walker (2013) inside each
    stratum; ``theta`` is treated as known, as the paper does. Without variance
    of the history within strata nothing is adjusted.

    Examples
    --------
    >>> panel = OutcomePanel.from_arrays(fulfilled=np.array([2, 4, 3, 6, 8, 7]),
    ...                                  history=np.array([1.0, 3.0, 2.0, 1.0, 3.0, 2.0]))
    >>> schedule = AssignmentSchedule(unit_of_user=np.arange(6),
    ...     is_treated=np.array([[0], [0], [0], [1], [1], [1]], bool),
    ...     period_start_ticks=[0], n_ticks=1, treated_probability=0.5,
    ...     randomization="complete", stratum_of_unit=np.zeros(6, dtype=int))
    >>> est = stratified_regression_adjusted_difference(panel, schedule)
    >>> est.point, round(est.standard_error, 6)
    (4.0, 0.0)
    """
    method = "stratified_regression_adjusted_difference"
    confidence = _check_inputs(panel, schedule, confidence, method)
    outcome = panel.user_outcome()
    strata = user_strata(schedule)
    history = np.asarray(panel.pre_outcome, dtype=float)
    if outcome.size:
        counts = np.bincount(strata).astype(float)
        centred = history - (np.bincount(strata, weights=history) / counts)[strata]
        centred_outcome = outcome - (np.bincount(strata, weights=outcome) / counts)[strata]
        spread = float(np.dot(centred, centred))
        if spread > 0:
            outcome = outcome - float(np.dot(centred, centred_outcome)) / spread * centred
    return _stratified_neyman(outcome, schedule.user_is_treated(), strata,
                              confidence=confidence, method=method)
