"""The test of interference: compare a user-level and a cluster-level estimate run side by side."""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy import stats

from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.estimators._inference import (
    check_common_inputs,
    check_static,
    satterthwaite_df,
)
from spillgauge.estimators.cluster_level import hajek_cluster
from spillgauge.estimators.estimate import Estimate
from spillgauge.estimators.user_level import difference_in_means
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["InterferenceTest", "interference_test"]


@dataclass(frozen=True, slots=True)
class InterferenceTest:
    """The result of a test of interference.

    Attributes
    ----------
    user_arm, cluster_arm : Estimate
        Difference in means over the user arm's users; Hajek estimate over the
        cluster arm's clusters. Both on the GTE's scale.
    delta, delta_se : float
        ``user_arm.point - cluster_arm.point`` and ``sqrt(se_user^2 + v_cluster)``,
        ``v_cluster`` the cluster half's Neyman-type variance (see Notes).
    statistic : float
        ``delta / delta_se``.
    p_value : float
        Two-sided, from Student's t with Welch–Satterthwaite degrees of freedom.
    rejects : bool
        ``|statistic| >= t_{1 - alpha/2, df}`` (``df`` as for the p-value; close to
        the normal threshold when both halves have many units).
    rejects_chebyshev : bool
        ``|statistic| >= 1 / sqrt(alpha)``: a distribution-free test of level at
        most alpha by Chebyshev's inequality.
    """

    user_arm: Estimate
    cluster_arm: Estimate
    delta: float
    delta_se: float
    statistic: float
    p_value: float
    rejects: bool
    rejects_chebyshev: bool


def interference_test(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                      confidence: float = 0.95) -> InterferenceTest:
    """Test for interference by comparing the user arm's and the cluster arm's estimates.

    Parameters
    ----------
    panel : OutcomePanel
    schedule : AssignmentSchedule
        Drawn by a test-of-interference design: static, units are users, with
        ``cluster_of_user`` and ``is_cluster_arm``.
    confidence : float
        ``1 - alpha`` of the test and of the arms' intervals.

    Returns
    -------
    InterferenceTest

    Notes
    -----
    Saveski, Pouget-Abadie, Saint-Jacques, Duan, Ghosh, Xu & Airoldi (2017),
    *Detecting network effects: randomizing over randomized experiments*:
    without interference both halves estimate the same effect, so
    ``delta = mu_user - mu_cluster`` has mean 0 and variance at most
    ``se_user^2 + se_cluster^2 + v_split`` (conservative Neyman-type variances, the
    cluster half's with each arm's own ``G_a / (G_a - 1)`` factor; the halves
    are randomized independently; ``v_split`` is how much the halves' true effects
    differ through the random split of clusters when effects differ across
    clusters, see ``_split_variance``). The user arm uses :func:`difference_in_means`,
    the cluster arm :func:`hajek_cluster` (user-weighted, so both halves target
    the same per-user effect even when clusters differ in size). A positive
    ``delta`` means the user-level design overstates the effect relative to the
    cluster-level one, as stock-out spillover does.

    Examples
    --------
    Six clusters of two users; clusters 0-1 randomize users, clusters 2-5 whole:

    >>> y = np.array([1, 2, 3, 4, 1, 1, 3, 4, 2, 2, 4, 5])
    >>> treated = np.array([0, 1, 0, 1, 0, 0, 1, 1, 0, 0, 1, 1], bool)
    >>> schedule = AssignmentSchedule(
    ...     unit_of_user=np.arange(12), is_treated=treated[:, None], period_start_ticks=[0],
    ...     n_ticks=1, treated_probability=0.5, unit_kind="user", randomization="complete",
    ...     cluster_of_user=np.repeat(np.arange(6), 2),
    ...     is_cluster_arm=np.array([False, False, True, True, True, True]))
    >>> result = interference_test(OutcomePanel.from_arrays(fulfilled=y), schedule)
    >>> result.user_arm.point, result.cluster_arm.point, result.delta  # (3-2), (4-1.5)
    (1.0, 2.5, -1.5)
    """
    method = "interference_test"
    confidence = check_common_inputs(panel, schedule, confidence, method)
    check_static(schedule, method)
    if schedule.cluster_of_user is None or schedule.is_cluster_arm is None:
        raise ValueError(f"{method} needs a schedule with cluster_of_user and is_cluster_arm "
                         "(drawn by a test-of-interference design)")
    clusters = np.asarray(schedule.cluster_of_user)
    in_cluster_arm = np.asarray(schedule.is_cluster_arm)[clusters]
    treated = schedule.user_is_treated()
    users = np.flatnonzero(~in_cluster_arm)
    user_panel = _sub_panel(panel, users)
    user_schedule = AssignmentSchedule(
        unit_of_user=np.arange(users.size), is_treated=treated[users][:, None],
        period_start_ticks=np.zeros(1, dtype=np.int64), n_ticks=schedule.n_ticks,
        treated_probability=schedule.treated_probability, unit_kind="user",
        randomization="complete")
    members = np.flatnonzero(in_cluster_arm)
    labels, relabelled = np.unique(clusters[members], return_inverse=True)
    cluster_treated = np.zeros(labels.size, dtype=bool)
    cluster_treated[relabelled] = treated[members]
    cluster_schedule = AssignmentSchedule(
        unit_of_user=relabelled, is_treated=cluster_treated[:, None],
        period_start_ticks=np.zeros(1, dtype=np.int64), n_ticks=schedule.n_ticks,
        treated_probability=schedule.treated_probability, unit_kind="cluster",
        randomization="complete")
    user_arm = difference_in_means(user_panel, user_schedule, confidence=confidence)
    cluster_arm = hajek_cluster(_sub_panel(panel, members), cluster_schedule,
                                confidence=confidence)
    totals = np.bincount(relabelled, weights=panel.user_outcome()[members],
                         minlength=labels.size)
    sizes = np.bincount(relabelled, minlength=labels.size).astype(float)
    cluster_variance = _neyman_ratio_variance(totals, sizes, cluster_treated)
    split_variance, split_df = _split_variance(panel.user_outcome()[users], treated[users],
                                               clusters[users], labels.size)
    delta = user_arm.point - cluster_arm.point
    delta_se = math.sqrt(user_arm.standard_error ** 2 + cluster_variance + split_variance)
    alpha = 1.0 - confidence
    if not (math.isfinite(delta) and math.isfinite(delta_se) and delta_se > 0):
        warnings.warn(f"{method}: an arm's estimate or its SE is undefined; no test",
                      DegenerateEstimateWarning, stacklevel=2)
        nan = float("nan")
        return InterferenceTest(user_arm, cluster_arm, delta, delta_se, nan, nan, False, False)
    statistic = delta / delta_se
    # Welch-Satterthwaite degrees of freedom: the cluster half's variance rests on few
    # clusters (G - 2 df), the user half's on many users.
    v_user, v_cluster = user_arm.standard_error ** 2, cluster_variance
    df_user, df_cluster = max(user_arm.n_units - 2, 1), max(cluster_arm.n_units - 2, 1)
    parts = [(v_user, df_user), (v_cluster, df_cluster)]
    if split_variance > 0:
        parts.append((split_variance, split_df))
    df = satterthwaite_df(parts)
    return InterferenceTest(
        user_arm=user_arm, cluster_arm=cluster_arm, delta=float(delta),
        delta_se=float(delta_se), statistic=float(statistic),
        p_value=float(2 * stats.t.sf(abs(statistic), df)),
        rejects=bool(abs(statistic) >= stats.t.ppf(1 - alpha / 2, df)),
        rejects_chebyshev=bool(abs(statistic) >= 1 / math.sqrt(alpha)))


def _split_variance(outcome: np.ndarray, treated: np.ndarray, cluster: np.ndarray,
                    n_cluster_half: int) -> tuple[float, float]:
    """Return how much the two halves' true effects differ through the random split, and its df.

    Without interference the halves still target different effects when the
    effect differs across clusters: which clusters land in which half is random.
    For a random split of clusters into ``G_U`` and ``G_C``, the difference of the
    halves' mean cluster effects has variance ``S_tau^2 (1/G_U + 1/G_C)``, ``S_tau^2``
    the variance of the cluster effects (Neyman 1923 for two disjoint random
    samples of a finite population; Pouget-Abadie et al. 2019 and Saveski et al.
    2017 add this term to the test's variance). ``S_tau^2`` is estimated from the
    user half, whose clusters each hold treated and control users: the spread of
    their within-cluster differences in means beyond those differences' own
    sampling variance. Returns ``(0, inf)`` when fewer than 2 clusters allow it.
    """
    effects, noise = [], []
    for label in np.unique(cluster):
        members = cluster == label
        on, off = outcome[members & treated], outcome[members & ~treated]
        if on.size < 2 or off.size < 2:
            continue
        effects.append(on.mean() - off.mean())
        noise.append(np.var(on, ddof=1) / on.size + np.var(off, ddof=1) / off.size)
    if len(effects) < 2 or n_cluster_half < 1:
        return 0.0, math.inf
    spread = float(np.var(effects, ddof=1) - np.mean(noise))
    if spread <= 0:
        return 0.0, math.inf
    return spread * (1 / len(effects) + 1 / n_cluster_half), float(len(effects) - 1)


def _neyman_ratio_variance(totals: np.ndarray, sizes: np.ndarray, treated: np.ndarray) -> float:
    """Variance of a difference of two ratio means over clusters, Neyman-style per arm.

    ``V = sum_a G_a / (G_a - 1) sum_{g in a} (Y_g - r_a N_g)^2 / N_a^2``: the
    linearization of the Hajek estimator with each arm's own small-sample factor,
    which with equal cluster sizes is exactly ``s_1^2 / G_1 + s_0^2 / G_0`` on
    cluster means, the conservative Neyman variance the test calls for.
    """
    variance = 0.0
    for arm in (treated, ~treated):
        count = int(arm.sum())
        if count < 2:
            return float("nan")
        rate = totals[arm].sum() / sizes[arm].sum()
        residuals = totals[arm] - rate * sizes[arm]
        variance += count / (count - 1) * float(np.sum(residuals ** 2)) / sizes[arm].sum() ** 2
    return variance


def _sub_panel(panel: OutcomePanel, users: np.ndarray) -> OutcomePanel:
    """Return the panel of a subset of users: their totals (per-pool tables rebuilt from them)."""
    return OutcomePanel.from_arrays(fulfilled=np.asarray(panel.fulfilled_total)[users],
                                    demanded=np.asarray(panel.demanded_total)[users],
                                    pool_of_user=np.unique(panel.pool_of_user[users],
                                                           return_inverse=True)[1],
                                    history=panel.history[users], tick_hours=panel.tick_hours,
                                    pre_outcome=panel.pre_outcome[users],
                                    outcome_total=np.asarray(panel.outcome_total)[users])
