"""Effect on the launched pools of a regional launch: pre/post, difference in differences,
synthetic control.

A few pools switch on at one time and stay on; nobody randomized which. Each
estimator works on the pool-day series of fulfilled orders per user and targets
the effect on the launched pools: the mean over their users of the orders the
launch added over the post-launch days.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
from scipy import optimize

from spillgauge.estimators._inference import (
    build_estimate,
    check_common_inputs,
    degenerate_estimate,
)
from spillgauge.estimators.estimate import Estimate
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["pool_day_series", "synthetic_control_weights", "pre_post_difference",
           "launch_difference_in_differences", "synthetic_control"]


def pool_day_series(panel: OutcomePanel, schedule: AssignmentSchedule, method: str):
    """Return ``(series, users, launched, n_pre_days)`` of a launch's world.

    ``series`` has shape ``(n_pools, n_days)``: fulfilled orders per user and day
    of each pool with users; ``launched`` marks the pools treated after the
    launch. Raises ``ValueError`` unless the schedule is a launch: units are pools,
    two periods, the second starting on a day boundary, all control before it.
    """
    if schedule.unit_kind != "pool" or schedule.n_periods != 2:
        raise ValueError(f"{method} needs a launch schedule (pools, two periods)")
    ticks_per_day = 24 // panel.tick_hours
    launch_tick = int(schedule.period_start_ticks[1])
    if launch_tick % ticks_per_day or panel.n_ticks % ticks_per_day:
        raise ValueError(f"{method} needs the launch on a day boundary")
    if schedule.is_treated[:, 0].any():
        raise ValueError(f"{method} needs every pool in control before the launch")
    n_units = schedule.n_units
    daily = np.asarray(panel.pool_outcome, dtype=float)[:n_units]
    daily = daily.reshape(n_units, -1, ticks_per_day).sum(axis=2)
    users = panel.users_per_pool()[:n_units].astype(float)
    keep = users > 0
    series = daily[keep] / users[keep][:, None]
    return series, users[keep], schedule.is_treated[keep, 1], launch_tick // ticks_per_day


def _check_inputs(panel, schedule, confidence, method):
    confidence = check_common_inputs(panel, schedule, confidence, method)
    return (confidence, *pool_day_series(panel, schedule, method))


def _weighted_mean(values: np.ndarray, weights: np.ndarray) -> float:
    return float(np.sum(values * weights) / np.sum(weights))


def _cluster_variance(values: np.ndarray, weights: np.ndarray) -> float:
    """Variance of a weighted mean of independent pools' values (ratio estimator, HC1-like)."""
    g = values.size
    share = weights / weights.sum()
    mean = np.sum(share * values)
    return float(g / (g - 1) * np.sum(share ** 2 * (values - mean) ** 2))


def pre_post_difference(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                        confidence: float = 0.95) -> Estimate:
    """Estimate the effect on the launched pools by their after-minus-before change.

    Per launched pool ``p``: ``D_p = mean_post(y_pd) - mean_pre(y_pd)``; the
    estimate is the user-weighted mean of ``D_p`` times the post-launch days. The
    SE treats pools as independent clusters (t with ``G - 1`` df); it does not see
    market-wide changes (a trend, a shock), which bias the estimate itself.
    """
    method = "pre_post_difference"
    confidence, series, users, launched, n_pre = _check_inputs(panel, schedule, confidence,
                                                               method)
    n_post = series.shape[1] - n_pre
    change = series[:, n_pre:].mean(axis=1) - series[:, :n_pre].mean(axis=1)
    g = int(launched.sum())
    if g < 2:
        return degenerate_estimate(method, "fewer than two launched pools", n_units=g)
    point = _weighted_mean(change[launched], users[launched]) * n_post
    variance = _cluster_variance(change[launched], users[launched]) * n_post ** 2
    return build_estimate(point, variance, confidence=confidence, method=method, n_units=g,
                          df=g - 1)


def launch_difference_in_differences(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                                     confidence: float = 0.95) -> Estimate:
    """Estimate the effect on the launched pools by difference in differences.

    ``(mean_launched D_p - mean_other D_p) x post days``, user-weighted, with
    ``D_p`` each pool's after-minus-before change: the two-way fixed-effects
    estimate of a single launch date (Angrist & Pischke 2009, ch. 5). SE:
    pools as clusters (Bertrand, Duflo & Mullainathan 2004), Welch's combination
    of the two groups with Welch-Satterthwaite degrees of freedom.
    """
    method = "launch_difference_in_differences"
    confidence, series, users, launched, n_pre = _check_inputs(panel, schedule, confidence,
                                                               method)
    n_post = series.shape[1] - n_pre
    change = series[:, n_pre:].mean(axis=1) - series[:, :n_pre].mean(axis=1)
    g1, g0 = int(launched.sum()), int((~launched).sum())
    if g1 < 2 or g0 < 2:
        return degenerate_estimate(method, "fewer than two pools in a group", n_units=g1 + g0)
    point = (_weighted_mean(change[launched], users[launched])
             - _weighted_mean(change[~launched], users[~launched])) * n_post
    v1 = _cluster_variance(change[launched], users[launched])
    v0 = _cluster_variance(change[~launched], users[~launched])
    df = (v1 + v0) ** 2 / (v1 ** 2 / (g1 - 1) + v0 ** 2 / (g0 - 1)) if v1 + v0 > 0 else g1 - 1
    return build_estimate(point, (v1 + v0) * n_post ** 2, confidence=confidence, method=method,
                          n_units=g1 + g0, df=df)


def synthetic_control_weights(target: np.ndarray, donors: np.ndarray) -> np.ndarray:
    """Return donor weights ``w >= 0``, ``sum w = 1`` minimising ``||target - donors' w||^2``.

    Parameters
    ----------
    target : ndarray, shape (n_periods,)
    donors : ndarray, shape (n_donors, n_periods)

    Notes
    -----
    The constrained least squares of Abadie, Diamond & Hainmueller (2010) on the
    pre-period outcomes, solved by non-negative least squares (Lawson & Hanson
    1974; ``scipy.optimize.nnls``) with the sum-to-one constraint as a heavily
    weighted extra row, then rescaled to sum exactly to 1.

    >>> donors = np.array([[1.0, 2.0, 3.0], [3.0, 1.0, 0.0], [0.0, 0.0, 5.0]])
    >>> synthetic_control_weights(0.25 * donors[0] + 0.75 * donors[1], donors).round(6).tolist()
    [0.25, 0.75, 0.0]
    """
    target = np.asarray(target, dtype=float)
    donors = np.asarray(donors, dtype=float)
    scale = max(float(np.abs(donors).max()), float(np.abs(target).max()), 1e-12)
    penalty = 1e4 * scale * math.sqrt(target.size)
    matrix = np.vstack([donors.T, np.full(donors.shape[0], penalty)])
    rhs = np.append(target, penalty)
    weights, _ = optimize.nnls(matrix, rhs, maxiter=50 * donors.shape[0] + 100)
    total = weights.sum()
    return weights / total if total > 0 else np.full(donors.shape[0], 1.0 / donors.shape[0])


def _synthetic_gaps(series: np.ndarray, users: np.ndarray, treated: np.ndarray, n_pre: int
                    ) -> tuple[np.ndarray, float]:
    """Gaps (treated - synthetic) per day, and the pre-period RMSPE."""
    target = (series[treated] * users[treated, None]).sum(axis=0) / users[treated].sum()
    donors = series[~treated]
    weights = synthetic_control_weights(target[:n_pre], donors[:, :n_pre])
    gaps = target - weights @ donors
    return gaps, float(np.sqrt(np.mean(gaps[:n_pre] ** 2)))


def synthetic_control(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                      confidence: float = 0.95) -> Estimate:
    """Estimate the effect on the launched pools by synthetic control.

    The launched pools' user-weighted daily series is matched over the
    pre-period by a convex combination of the other pools
    (:func:`synthetic_control_weights`); the estimate is the mean post-launch gap
    times the post-launch days (Abadie, Diamond & Hainmueller 2010).

    Inference is placebo-in-space (Abadie, Diamond & Hainmueller 2010, section
    2.4): each other pool in turn is treated as launched, with the remaining
    pools as donors. ``p_value`` is the share of all (placebo and real) whose
    post/pre RMSPE ratio is at least the real one's. The standard error is the SD
    of the placebo estimates (the placebo variance of Arkhangelsky et al. 2021,
    Algorithm 4, with one pool per placebo, so conservative when several pools
    launch), and the interval uses Student's t with ``n_placebos - 1`` df.
    """
    method = "synthetic_control"
    confidence, series, users, launched, n_pre = _check_inputs(panel, schedule, confidence,
                                                               method)
    n_post = series.shape[1] - n_pre
    n_donors = int((~launched).sum())
    if not launched.any() or n_donors < 3 or n_pre < 2:
        return degenerate_estimate(method, "fewer than three donor pools or two pre-period "
                                   "days", n_units=int(series.shape[0]))
    gaps, pre_rmspe = _synthetic_gaps(series, users, launched, n_pre)
    point = float(gaps[n_pre:].mean()) * n_post

    def ratio(g: np.ndarray, pre: float) -> float:
        post = float(np.sqrt(np.mean(g[n_pre:] ** 2)))
        return post / pre if pre > 0 else math.inf

    placebo_points, placebo_ratios = [], []
    donor_index = np.flatnonzero(~launched)
    for j in donor_index:
        keep = ~launched
        fake = np.zeros(keep.sum(), dtype=bool)
        fake[np.searchsorted(donor_index, j)] = True
        g, pre = _synthetic_gaps(series[keep], users[keep], fake, n_pre)
        placebo_points.append(float(g[n_pre:].mean()) * n_post)
        placebo_ratios.append(ratio(g, pre))
    real_ratio = ratio(gaps, pre_rmspe)
    p_value = (1 + sum(r >= real_ratio for r in placebo_ratios)) / (1 + len(placebo_ratios))
    placebo_points = np.array(placebo_points)
    variance = float(np.var(placebo_points, ddof=1))
    estimate = build_estimate(point, variance, confidence=confidence, method=method,
                              n_units=int(series.shape[0]), df=len(placebo_points) - 1)
    return replace(estimate, p_value=float(p_value))

