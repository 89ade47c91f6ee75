"""Cluster-level estimators for static cluster- or pool-randomized schedules.

The units are the schedule's assignment units (``schedule.unit_of_user``); a
unit is treated when ``schedule.is_treated[:, 0]`` says so. Each user's outcome
is ``panel.user_outcome()``. Because these designs often have few clusters,
every variance here is the CR2 (Bell & McCaffrey 2002) one, per arm, and every
interval uses Student's t with Bell and McCaffrey's Satterthwaite-type degrees
of freedom (Imbens & Kolesar 2016; Pustejovsky & Tipton 2018): ``G - 2`` for
equal arms of equal clusters, fewer when arms or clusters differ in size.
"""

from __future__ import annotations

import numpy as np

from spillgauge.estimators._inference import (
    build_estimate,
    check_common_inputs,
    check_static,
    cr2_arm_difference,
    degenerate_estimate,
)
from spillgauge.estimators.estimate import Estimate
from spillgauge.estimators.relative import with_control_mean
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["hajek_cluster", "horvitz_thompson_cluster"]


def _check_inputs(panel: OutcomePanel, schedule: AssignmentSchedule, confidence: float,
                  method: str) -> float:
    confidence = check_common_inputs(panel, schedule, confidence, method)
    check_static(schedule, method)
    return confidence


def _cluster_totals(panel: OutcomePanel, schedule: AssignmentSchedule
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return each unit's outcome total, its number of users and whether it is treated."""
    n_units = schedule.n_units
    totals = np.bincount(schedule.unit_of_user, weights=panel.user_outcome(),
                         minlength=n_units)
    sizes = np.bincount(schedule.unit_of_user, minlength=n_units)
    return totals, sizes, schedule.is_treated[:, 0].copy()


def hajek_cluster(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                  confidence: float = 0.95) -> Estimate:
    """Estimate the GTE by the ratio of cluster totals (Hajek) with a cluster-robust SE.

    Parameters
    ----------
    panel : OutcomePanel
        Outcomes of the world (``panel.user_outcome()`` per user).
    schedule : AssignmentSchedule
        A static schedule whose units (clusters, pools) are randomized.
    confidence : float, default 0.95
        Level of the confidence interval, in (0, 1).

    Returns
    -------
    Estimate
        ``method="hajek_cluster"``; ``n_units`` is ``G``, the number of clusters
        holding at least one user (clusters without users carry no information
        and are left out).

    Raises
    ------
    ValueError
        If panel and schedule hold different numbers of users, the schedule has
        more than one period, or ``confidence`` is outside (0, 1).

    Warns
    -----
    DegenerateEstimateWarning
        If an arm has no cluster with users (every field NaN) or only one (point
        kept, standard error and interval NaN).

    Notes
    -----
    ``point = sum_{g treated} T_g / N_1 - sum_{g control} T_g / N_0``, with
    ``T_g`` the outcome total of cluster ``g`` and ``N_1``, ``N_0`` the numbers of
    users in treated and control clusters: the treated users' mean minus the
    control users' mean, i.e. the OLS slope of ``y ~ 1 + z``.

    The variance is the CR2 cluster-robust variance of that slope (Bell &
    McCaffrey 2002):

    ``V = sum_a sum_{g in a} e_g^2 / ((1 - N_g / N_a) N_a^2)``,

    with ``e_g = T_g - N_g * (mean of g's arm)`` the cluster's residual sum and
    ``N_a`` the users of its arm. With equal clusters each arm gets its own factor
    ``G_a / (G_a - 1)``, so ``V`` is the Neyman variance of cluster means; the
    pooled CR1 factor ``G / (G - 1)`` would give only ``(G - 2)/(G - 1)`` of it and
    under-cover with few clusters. The interval uses Student's t with Bell and
    McCaffrey's degrees of freedom (Imbens & Kolesar 2016), see
    ``cr2_arm_difference``.

    Examples
    --------
    >>> panel = OutcomePanel.from_arrays(fulfilled=np.array([1, 3, 2, 2, 5, 7, 6, 4]))
    >>> schedule = AssignmentSchedule(
    ...     unit_of_user=np.array([0, 0, 1, 1, 2, 2, 3, 3]),
    ...     is_treated=np.array([[0], [0], [1], [1]], bool), period_start_ticks=[0],
    ...     n_ticks=1, treated_probability=0.5, unit_kind="cluster", randomization="complete")
    >>> est = hajek_cluster(panel, schedule)  # 22/4 - 8/4; V = 2 * (1 + 1) / 4**2
    >>> est.point, round(est.standard_error ** 2, 6), est.n_units, est.degrees_of_freedom
    (3.5, 0.25, 4, 2.0)
    """
    method = "hajek_cluster"
    confidence = _check_inputs(panel, schedule, confidence, method)
    totals, sizes, is_treated = _cluster_totals(panel, schedule)
    has_users = sizes > 0
    treated, control = is_treated & has_users, ~is_treated & has_users
    n_clusters = int(has_users.sum())
    n_treated, n_control = int(treated.sum()), int(control.sum())
    if n_treated == 0 or n_control == 0:
        arm = "treated" if n_treated == 0 else "control"
        return degenerate_estimate(method, f"no {arm} cluster has users", n_units=n_clusters)
    users_treated, users_control = sizes[treated].sum(), sizes[control].sum()
    mean_treated = totals[treated].sum() / users_treated
    mean_control = totals[control].sum() / users_control
    point = float(mean_treated - mean_control)
    if n_treated < 2 or n_control < 2:
        return degenerate_estimate(method, "an arm has a single cluster, so the "
                                   "cluster-robust variance is undefined",
                                   n_units=n_clusters, point=point)
    residual_sums = totals - sizes * np.where(is_treated, mean_treated, mean_control)
    variance, df = cr2_arm_difference(residual_sums[has_users], sizes[has_users].astype(float),
                                      is_treated[has_users])
    estimate = build_estimate(point, variance, confidence=confidence, method=method,
                              n_units=n_clusters, df=df)
    return with_control_mean(estimate, mean_control,
                             _control_part(residual_sums[control], sizes[control]))


def _design_probability(schedule: AssignmentSchedule, is_treated: np.ndarray,
                        method: str) -> float:
    """Return the probability that a cluster is treated under the schedule's design."""
    if schedule.randomization == "complete":
        return float(is_treated.sum()) / schedule.n_units
    if schedule.randomization == "bernoulli":
        p = float(schedule.treated_probability)
        if not 0.0 < p < 1.0:
            raise ValueError(f"{method}: a Bernoulli schedule needs treated_probability in "
                             f"(0, 1); got {schedule.treated_probability!r}")
        return p
    raise ValueError(f"{method} needs a randomized schedule ('complete' or 'bernoulli'); "
                     f"got randomization={schedule.randomization!r}")


def horvitz_thompson_cluster(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                             confidence: float = 0.95) -> Estimate:
    """Estimate the GTE by inverse-probability weighting of cluster totals (Horvitz-Thompson).

    Parameters
    ----------
    panel : OutcomePanel
        Outcomes of the world (``panel.user_outcome()`` per user).
    schedule : AssignmentSchedule
        A static schedule with ``randomization`` ``"complete"`` (``m`` of ``G``
        clusters treated, ``p = m / G``) or ``"bernoulli"`` (each cluster with
        ``p = schedule.treated_probability``).
    confidence : float, default 0.95
        Level of the confidence interval, in (0, 1).

    Returns
    -------
    Estimate
        ``method="horvitz_thompson_cluster"``; ``n_units`` is ``G``,
        ``schedule.n_units`` (every randomized cluster, with or without users).

    Raises
    ------
    ValueError
        As :func:`hajek_cluster`, and for a ``"fixed"`` schedule or a Bernoulli
        schedule whose ``treated_probability`` is not in (0, 1).

    Warns
    -----
    DegenerateEstimateWarning
        Complete randomization with no cluster in an arm (every field NaN) or a
        single one (point kept, standard error and interval NaN); Bernoulli with
        fewer than 3 clusters (no t interval).

    Notes
    -----
    ``point = (1/N) [sum_{g treated} T_g / p - sum_{g control} T_g / (1 - p)]``,
    ``N`` users, ``T_g`` the outcome total of cluster ``g``. It is unbiased for
    the GTE when each user's outcome depends only on its own cluster's arm
    (Horvitz & Thompson 1952).

    Complete randomization: the point is ``(G/N)`` times the difference in means
    of cluster totals, and the variance is Neyman's on cluster totals,
    ``(G/N)^2 (s1^2 / m + s0^2 / (G - m))``, conservative by ``(G/N)^2 S_tau^2 / G``.

    Bernoulli: the number treated is random and the Neyman form would miss
    that part of the variance, so the variance is the conservative
    Horvitz-Thompson one (Aronow & Samii 2017, with Young's inequality for the
    unobservable cross term),
    ``(1/N^2) [sum_{treated} T_g^2 / p^2 + sum_{control} T_g^2 / (1-p)^2]``,
    whose expectation exceeds the true variance by ``sum_g (T_g(1) - T_g(0))^2 / N^2``.

    Complete randomization's variance is the CR2 one of the regression of
    cluster totals on the arm (each cluster one observation), so its interval uses
    Bell and McCaffrey's degrees of freedom (Welch's under equal variances:
    ``G - 2`` for equal arms); Bernoulli's uses ``G - 2``.

    Examples
    --------
    >>> panel = OutcomePanel.from_arrays(fulfilled=np.array([1, 3, 2, 2, 5, 7, 6, 4]))
    >>> schedule = AssignmentSchedule(
    ...     unit_of_user=np.array([0, 0, 1, 1, 2, 2, 3, 3]),
    ...     is_treated=np.array([[0], [0], [1], [1]], bool), period_start_ticks=[0],
    ...     n_ticks=1, treated_probability=0.5, unit_kind="cluster", randomization="complete")
    >>> est = horvitz_thompson_cluster(panel, schedule)
    >>> est.point, round(est.standard_error, 6), est.n_units
    (3.5, 0.5, 4)
    """
    method = "horvitz_thompson_cluster"
    confidence = _check_inputs(panel, schedule, confidence, method)
    totals, _, is_treated = _cluster_totals(panel, schedule)
    p = _design_probability(schedule, is_treated, method)
    n_clusters, n_users = schedule.n_units, panel.n_users
    n_treated = int(is_treated.sum())
    n_control = n_clusters - n_treated
    if n_users == 0 or p in (0.0, 1.0):
        return degenerate_estimate(method, "there are no users or an arm of the complete "
                                   "randomization is empty", n_units=n_clusters)
    point = float((totals[is_treated].sum() / p - totals[~is_treated].sum() / (1 - p)) / n_users)
    if schedule.randomization == "complete":
        if n_treated < 2 or n_control < 2:
            return degenerate_estimate(method, "an arm has a single cluster, so the Neyman "
                                       "variance is undefined", n_units=n_clusters, point=point)
        residuals = totals - np.where(is_treated, totals[is_treated].mean(),
                                      totals[~is_treated].mean())
        variance, df = cr2_arm_difference(residuals, np.ones(n_clusters), is_treated)
        variance *= (n_clusters / n_users) ** 2
        control_variance = (_control_part(residuals[~is_treated], np.ones(n_control))
                            * (n_clusters / n_users) ** 2)
    else:
        if n_clusters < 3:
            return degenerate_estimate(method, "fewer than 3 clusters leave no degrees of "
                                       "freedom for the interval", n_units=n_clusters,
                                       point=point)
        variance = (np.sum(totals[is_treated] ** 2) / p ** 2
                    + np.sum(totals[~is_treated] ** 2) / (1 - p) ** 2) / n_users ** 2
        control_variance = np.sum(totals[~is_treated] ** 2) / (1 - p) ** 2 / n_users ** 2
        df = n_clusters - 2
    estimate = build_estimate(point, float(variance), confidence=confidence, method=method,
                              n_units=n_clusters, df=df)
    return with_control_mean(estimate, totals[~is_treated].sum() / (1 - p) / n_users,
                             control_variance)


def _control_part(residual_sums: np.ndarray, sizes: np.ndarray) -> float:
    """Return the control arm's own term of :func:`cr2_arm_difference`: its mean's variance.

    ``sum_g e_g^2 / ((1 - N_g / N_0) N_0^2)`` over the control clusters.
    """
    n_g = sizes.astype(float)
    n_arm = float(n_g.sum())
    return float(np.sum(residual_sums ** 2 / ((1.0 - n_g / n_arm) * n_arm ** 2)))

