"""Difference in differences for a staggered rollout over pools (two-way fixed effects)."""

from __future__ import annotations

import numpy as np

from spillgauge.estimators._inference import (
    build_estimate,
    check_common_inputs,
    check_over_time,
    degenerate_estimate,
)
from spillgauge.estimators.estimate import Estimate
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["difference_in_differences"]


def _check_inputs(panel: OutcomePanel, schedule: AssignmentSchedule, confidence: float,
                  method: str) -> float:
    confidence = check_common_inputs(panel, schedule, confidence, method)
    check_over_time(panel, schedule, method, allow_market=False)
    return confidence


def difference_in_differences(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                              confidence: float = 0.95) -> Estimate:
    """Estimate the GTE of a staggered rollout by two-way fixed effects.

    Parameters
    ----------
    panel : OutcomePanel
    schedule : AssignmentSchedule
        Units are the pools; periods are the rollout's periods.
    confidence : float, default 0.95

    Returns
    -------
    Estimate
        ``method="difference_in_differences"``; ``n_units`` is the number of pools.

    Notes
    -----
    With ``Y_pk`` the fulfilled orders per user and tick of pool ``p`` in period
    ``k`` and ``D_pk`` its arm, weighted least squares (weights: users x ticks)
    of ``Y_pk = a_p + g_k + tau D_pk`` gives ``tau`` per user and tick; the
    estimate is ``tau`` times the horizon in ticks. The standard error is
    cluster-robust by pool (Liang & Zeger 1986) with the usual small-sample factor
    ``G/(G-1) (N-1)/(N-K)`` (as statsmodels' ``cov_type="cluster"``), and the
    interval uses Student's t with ``G - 1`` degrees of freedom. Two-way fixed
    effects assume an effect that does not change with time since adoption;
    with carryover or effects that build up, it is biased (see
    Xiong, Athey, Bayati & Imbens 2024 on the design of such rollouts).

    Examples
    --------
    Three pools of one user, two periods of one tick; pool 2 switches on in
    period 1 and gains 2 orders while the others gain 1:

    >>> panel = OutcomePanel.from_arrays(fulfilled=np.array([[1, 2], [3, 4], [2, 4]]),
    ...                                  pool_of_user=np.arange(3))
    >>> schedule = AssignmentSchedule(
    ...     unit_of_user=np.arange(3), is_treated=np.array([[0, 0], [0, 0], [0, 1]], bool),
    ...     period_start_ticks=[0, 1], n_ticks=2, unit_kind="pool", randomization="complete")
    >>> round(difference_in_differences(panel, schedule).point, 12)  # (2 - 1) per tick x 2 ticks
    2.0
    """
    method = "difference_in_differences"
    confidence = _check_inputs(panel, schedule, confidence, method)
    lengths = schedule.period_lengths().astype(float)
    period = schedule.period_of_tick()
    n_units, n_periods = schedule.n_units, schedule.n_periods
    totals = np.zeros((n_units, n_periods))
    np.add.at(totals.T, period, np.asarray(panel.pool_fulfilled, dtype=float)[:n_units].T)
    users = panel.users_per_pool()[:n_units].astype(float)
    keep = users > 0
    treated = schedule.is_treated[keep]
    if not treated.any() or treated.all():
        return degenerate_estimate(method, "no pool-period in one of the arms",
                                   n_units=int(keep.sum()))
    y = (totals[keep] / (users[keep][:, None] * lengths[None, :])).ravel()
    weights = (users[keep][:, None] * lengths[None, :]).ravel()
    n_pools = int(keep.sum())
    pool_index = np.repeat(np.arange(n_pools), n_periods)
    period_index = np.tile(np.arange(n_periods), n_pools)
    columns = [np.eye(n_pools)[pool_index], np.eye(n_periods)[period_index][:, 1:],
               treated.ravel().astype(float)[:, None]]
    design = np.hstack(columns)
    root = np.sqrt(weights)
    coefficients, *_ = np.linalg.lstsq(design * root[:, None], y * root, rcond=None)
    n_obs, n_params = design.shape
    if np.linalg.matrix_rank(design) < n_params or n_pools < 2:
        return degenerate_estimate(method, "the rollout leaves the effect unidentified "
                                   "(every pool switches at once, or one pool)",
                                   n_units=n_pools)
    residuals = y - design @ coefficients
    bread = np.linalg.inv(design.T @ (design * weights[:, None]))
    scores = np.zeros((n_pools, n_params))
    np.add.at(scores, pool_index, design * (weights * residuals)[:, None])
    meat = scores.T @ scores
    factor = n_pools / (n_pools - 1) * (n_obs - 1) / (n_obs - n_params)
    variance = float((bread @ meat @ bread)[-1, -1]) * factor
    scale = float(schedule.n_ticks)
    return build_estimate(float(coefficients[-1]) * scale, variance * scale ** 2,
                          confidence=confidence, method=method, n_units=n_pools,
                          df=n_pools - 1)
