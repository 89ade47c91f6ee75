"""Staggered rollouts over pools: period-by-period difference in differences, and two-way fixed effects.

:func:`staggered_difference_in_differences` targets the GTE: each period's
switched-on pools against the not-yet-switched ones, aggregated with equal
weight per hour (Callaway & Sant'Anna 2021; Sun & Abraham 2021).
:func:`difference_in_differences` is the two-way fixed effects regression, kept
as a named alternative; its implicit period weights differ from the GTE's
(Goodman-Bacon 2021), see :func:`two_way_fixed_effects_period_weights`.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from spillgauge.estimators._inference import (
    build_estimate,
    check_common_inputs,
    check_over_time,
    degenerate_estimate,
    satterthwaite_df,
)
from spillgauge.estimators._rollout_inference import (
    small_sample_correction,
    working_model,
)
from spillgauge.estimators.estimate import Estimate
from spillgauge.estimators.relative import with_control_mean
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["difference_in_differences", "staggered_difference_in_differences",
           "two_way_fixed_effects_period_weights"]


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
    np.add.at(totals.T, period, np.asarray(panel.pool_outcome, dtype=float)[:n_units].T)
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
    covariance = bread @ meat @ bread * factor
    variance = float(covariance[-1, -1])
    scale = float(schedule.n_ticks)
    estimate = build_estimate(float(coefficients[-1]) * scale, variance * scale ** 2,
                              confidence=confidence, method=method, n_units=n_pools,
                              df=n_pools - 1)
    # the fitted all-control level: the weighted mean of a_p + g_k over every pool-period,
    # a linear contrast of the coefficients with the same cluster-robust covariance
    contrast = weights @ design / weights.sum()
    contrast[-1] = 0.0
    return with_control_mean(estimate, float(contrast @ coefficients) * scale,
                             float(contrast @ covariance @ contrast) * scale ** 2,
                             float((covariance @ contrast)[-1]) * scale ** 2)


def _pool_period_rates(panel: OutcomePanel, schedule: AssignmentSchedule
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Return per-user-tick rates (pools with users x periods), users, period lengths, arms."""
    lengths = schedule.period_lengths().astype(float)
    period = schedule.period_of_tick()
    n_units, n_periods = schedule.n_units, schedule.n_periods
    totals = np.zeros((n_units, n_periods))
    np.add.at(totals.T, period, np.asarray(panel.pool_outcome, dtype=float)[:n_units].T)
    users = panel.users_per_pool()[:n_units].astype(float)
    keep = users > 0
    rates = totals[keep] / (users[keep][:, None] * lengths[None, :])
    return rates, users[keep], lengths, schedule.is_treated[keep]


def staggered_difference_in_differences(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                                        confidence: float = 0.95) -> Estimate:
    """Estimate the GTE of a staggered rollout period by period, with equal weight per hour.

    Parameters
    ----------
    panel : OutcomePanel
    schedule : AssignmentSchedule
        Units are the pools; periods are the rollout's periods; the first period
        is the baseline (all control in a rollout drawn by the rollout design).
    confidence : float, default 0.95

    Returns
    -------
    Estimate
        ``method="staggered_difference_in_differences"``; ``n_units`` is the number
        of pools with users.

    Warns
    -----
    DegenerateEstimateWarning
        When no period after the first has pools in both arms, or an arm of every
        such period holds a single pool.

    Notes
    -----
    With ``Y_pk`` pool ``p``'s orders per user and tick in period ``k`` and
    ``d_pk = Y_pk - Y_p0`` its change from the baseline, each period ``k >= 1`` with
    pools in both arms gives ``tau_k = mean_on(d_k) - mean_off(d_k)`` (user-weighted
    means over the switched-on and the not-yet-switched pools): the effect per
    user-tick in period ``k``, unbiased under the random order of the rollout
    whatever the calendar does to demand (Callaway & Sant'Anna 2021, the
    not-yet-treated comparison; Sun & Abraham 2021). The GTE gives every hour the
    same weight, so the estimate is ``T * sum_k L_k tau_k / sum_k L_k`` over the
    identified periods (``L_k`` their lengths, ``T`` the horizon): the hours of the
    baseline, which no pool is treated in, get the identified hours' mean effect.

    Variance: the linearization over pools ``psi_p`` (each period's residual of
    ``d_pk`` about its arm's mean, weighted as in the point, summed over the pool's
    periods: clustered by pool), with a small-sample factor and Satterthwaite degrees
    of freedom from a working model in which a pool's level is shared by all its
    periods: ``Cov(y_p) = s_a^2 g_p g_p' + diag(s_e^2 mu_pk / (N_p L_k))``, ``g_pk`` the
    market's level for the pool's arm in period ``k`` from a Poisson log-linear fit
    (Bell & McCaffrey 2002; Pustejovsky & Tipton 2018; see ``_rollout_inference``).
    Under a rhythm the level does not cancel in ``d_pk``: it moves every period's
    change of the pool together (a working model of independent pool-period rates
    gave variances 0.85 of the squared error and 93.3% coverage with 6 h periods
    under a strong rhythm). Market-wide shocks cancel inside
    each period's comparison but move the effect from period to period; the
    baseline's effect is extrapolated as the identified hours' relative effect
    ``rho = sum_k L_k tau_k / sum_k L_k Ybar_off,k`` times the baseline's level, a ratio
    of estimated levels: its delta-method terms enter ``psi_p`` (without them a strong
    diurnal rhythm with 6 h periods covered 93.1%: the ratio's noise is largest when the
    baseline sits at the rhythm's trough). The extrapolation's model error adds
    ``(L_0 Ybar_0)^2 (1 + 1/K) s^2`` with ``s^2`` the hour-weighted spread of the
    relative effects ``tau_k / Ybar_off,k`` beyond their sampling variance (``K``
    identified periods), with ``K - 1`` degrees of freedom.

    Examples
    --------
    Four pools of one user, three periods of one tick; pool 3 switches on in
    period 1, pool 2 in period 2; every switched-on pool gains 1 order per tick:

    >>> panel = OutcomePanel.from_arrays(
    ...     fulfilled=np.array([[1, 2, 1], [2, 3, 2], [1, 2, 2], [2, 4, 3]]),
    ...     pool_of_user=np.arange(4))
    >>> schedule = AssignmentSchedule(
    ...     unit_of_user=np.arange(4),
    ...     is_treated=np.array([[0, 0, 0], [0, 0, 0], [0, 0, 1], [0, 1, 1]], bool),
    ...     period_start_ticks=[0, 1, 2], n_ticks=3, unit_kind="pool",
    ...     randomization="complete")
    >>> est = staggered_difference_in_differences(panel, schedule)
    >>> round(est.point, 6)  # tau_1 = tau_2 = 1; the baseline tick adds 1.5 x 2 / (7/3 + 3/2)
    2.782609
    """
    method = "staggered_difference_in_differences"
    confidence = _check_inputs(panel, schedule, confidence, method)
    rates, users, lengths, treated = _pool_period_rates(panel, schedule)
    n_pools = rates.shape[0]
    lin = _linearize(rates, users, lengths, treated, float(schedule.n_ticks))
    if lin is None:
        return degenerate_estimate(method, "no period after the first has pools in both arms",
                                   n_units=n_pools)
    point, theta, psi_maps = lin.point, lin.theta, lin.psi_maps
    effects, used_lengths, levels, maps = lin.effects, lin.used_lengths, lin.levels, lin.maps
    missing_hours, missing_level = lin.missing_hours, lin.missing_level
    control_orders, period_variances = lin.control_orders, lin.period_variances
    psi = np.einsum("kpq,qk->p", psi_maps, rates)
    factor, df_pools = small_sample_correction(theta, psi_maps,
                                               *working_model(rates, users, lengths, treated))
    if not np.isfinite(factor):
        return degenerate_estimate(method, "an arm of every period holds a single pool, so "
                                   "the pool-level variance is undefined", n_units=n_pools,
                                   point=point)
    variance = factor * float(np.sum(psi ** 2))
    parts = [(variance, df_pools)]
    if missing_hours > 0 and effects.size >= 2 and np.all(levels > 0):
        share = used_lengths / used_lengths.sum()
        relative = effects / levels
        spread = float(share @ (relative - share @ relative) ** 2) * effects.size / (
            effects.size - 1)
        sampling = float(share @ (np.array(period_variances) / levels ** 2))
        between = max(spread - sampling, 0.0)
        extrapolation = (missing_hours * missing_level) ** 2 * (1 + 1 / effects.size) * between
        if extrapolation > 0:
            parts.append((extrapolation, effects.size - 1.0))
            variance += extrapolation
    df = satterthwaite_df(parts) if len(parts) > 1 else parts[0][1]
    estimate = build_estimate(point, variance, confidence=confidence, method=method,
                              n_units=n_pools, df=df)
    # The control mean is the horizon's counterfactual level the point is scaled by: the
    # not-yet-switched pools' rate in each identified period, the baseline's rate in the
    # others, so point / control mean = sum_k L_k tau_k / sum_k L_k Ybar_off,k. Its pool
    # contributions phi_p (residuals about each mean) give its variance and covariance
    # with the point by the same linearization over pools.
    phi = np.zeros(n_pools)
    for (k, on, _), length, level in zip(maps, used_lengths, levels):
        off = ~on
        phi[off] += length * users[off] / users[off].sum() * (rates[off, k] - level)
    if missing_hours > 0:
        phi += missing_hours * users / users.sum() * (rates[:, 0] - missing_level)
    return with_control_mean(estimate, control_orders + missing_hours * missing_level,
                             factor * float(phi @ phi), factor * float(psi @ phi))


class _Linearization(NamedTuple):
    point: float
    theta: np.ndarray          # (pools, periods): point = sum theta * rates
    psi_maps: np.ndarray       # (periods, pools, pools): psi = sum_k R_k rates[:, k]
    effects: np.ndarray
    used_lengths: np.ndarray
    levels: np.ndarray
    maps: list
    period_variances: list
    missing_hours: float
    missing_level: float
    control_orders: float


def _linearize(rates: np.ndarray, users: np.ndarray, lengths: np.ndarray, treated: np.ndarray,
               horizon: float) -> _Linearization | None:
    """Return the staggered point and its linearization over pools (None if unidentified)."""
    n_pools, n_periods = rates.shape
    change = rates - rates[:, :1]
    effects, used_lengths, levels, maps = [], [], [], []
    for k in range(1, n_periods):
        on, off = treated[:, k], ~treated[:, k]
        if not on.any() or not off.any():
            continue
        weight = np.where(on, users / users[on].sum(), -users / users[off].sum())
        effects.append(float(weight @ change[:, k]))
        used_lengths.append(lengths[k])
        levels.append(float(users[off] @ rates[off, k] / users[off].sum()))
        maps.append((k, on, weight))
    if not effects:
        return None
    effects, used_lengths, levels = np.array(effects), np.array(used_lengths), np.array(levels)
    # hours without a comparison (the all-control baseline) get the identified hours' effect
    # relative to the control level, applied to their own level: the effect per hour moves
    # with demand (a lift multiplies it) and the baseline's demand is observed
    missing_hours = horizon - used_lengths.sum()
    missing_level = float(users @ rates[:, 0] / users.sum()) if missing_hours > 0 else 0.0
    control_orders = float(used_lengths @ levels)
    scale = 1.0 + (missing_hours * missing_level / control_orders if control_orders > 0
                   else missing_hours / used_lengths.sum())
    hour_weight = scale * used_lengths
    point = float(hour_weight @ effects)
    # the estimate is linear in the rates: coefficients (pools x periods) of theta and of
    # each pool's residualized contribution psi_p (rows: pools; one map per period)
    theta = np.zeros((n_pools, n_periods))
    psi_maps = np.zeros((n_periods, n_pools, n_pools))   # psi = sum_k R_k y_k
    period_variances = []
    for (k, on, weight), w in zip(maps, hour_weight):
        theta[:, k] += w * weight
        theta[:, 0] -= w * weight
        # residual of d_k about its arm's user-weighted mean: (I - P) d_k
        share = np.where(on, users / users[on].sum(), users / users[~on].sum())
        same_arm = on[:, None] == on[None, :]
        residual_map = np.eye(n_pools) - same_arm * share[None, :]
        r = w * weight[:, None] * residual_map
        psi_maps[k] += r
        psi_maps[0] -= r
        residual = residual_map @ change[:, k]
        period_variances.append(float(np.sum((weight * residual) ** 2)))
    if missing_hours > 0 and control_orders > 0:
        # the baseline's share of the point, M S / C (M = missing hours x baseline level,
        # S = sum_k L_k tau_k, C = sum_k L_k Ybar_off,k), is a ratio of estimated levels: its
        # delta-method terms rho dM - rho (M / C) dC (rho = S / C) enter theta and psi too
        rho = float(used_lengths @ effects) / control_orders
        overall = users / users.sum()
        level_map = missing_hours * overall[:, None] * (np.eye(n_pools) - overall[None, :])
        theta[:, 0] += rho * missing_hours * overall
        psi_maps[0] += rho * level_map
        ratio = rho * missing_hours * missing_level / control_orders
        for (k, on, _), length in zip(maps, used_lengths):
            off = ~on
            share_off = np.where(off, users / users[off].sum(), 0.0)
            theta[:, k] -= ratio * length * share_off
            psi_maps[k] -= ratio * length * share_off[:, None] * (
                off[:, None] * (np.eye(n_pools) - share_off[None, :]))
    return _Linearization(point, theta, psi_maps, effects, used_lengths, levels, maps,
                          period_variances, missing_hours, missing_level, control_orders)


def two_way_fixed_effects_period_weights(is_treated: np.ndarray, users: np.ndarray,
                                         lengths: np.ndarray) -> np.ndarray:
    """Return the weight two-way fixed effects give each period's effect, shape ``(n_periods,)``.

    Parameters
    ----------
    is_treated : ndarray of bool, shape (n_pools, n_periods)
    users : ndarray, shape (n_pools,)
        Users per pool (> 0).
    lengths : ndarray, shape (n_periods,)
        Ticks per period.

    Notes
    -----
    By Frisch-Waugh-Lovell the weighted TWFE coefficient is
    ``sum w_pk D~_pk Y_pk / sum w_pk D~_pk D_pk``, ``D~`` the treatment residualized
    on pool and period effects (weights ``w_pk = N_p L_k``). When the effect per
    user-tick is ``tau_k`` in period ``k`` (the same for every pool) it returns
    ``sum_k omega_k tau_k`` with ``omega_k = sum_p w_pk D~_pk D_pk / sum w D~ D``
    (Goodman-Bacon 2021; de Chaisemartin & D'Haultfoeuille 2020). The GTE weighs
    period ``k`` by ``L_k / T``; the first, all-control period gets ``omega_0 = 0``.

    Examples
    --------
    >>> d = np.array([[0, 0, 0], [0, 0, 1], [0, 1, 1]], bool)
    >>> np.round(two_way_fixed_effects_period_weights(d, np.ones(3), np.ones(3)), 4).tolist()
    [0.0, 0.5, 0.5]
    """
    n_pools, n_periods = is_treated.shape
    weights = (np.asarray(users, float)[:, None] * np.asarray(lengths, float)[None, :]).ravel()
    pool_index = np.repeat(np.arange(n_pools), n_periods)
    period_index = np.tile(np.arange(n_periods), n_pools)
    fixed = np.hstack([np.eye(n_pools)[pool_index], np.eye(n_periods)[period_index][:, 1:]])
    d = is_treated.ravel().astype(float)
    root = np.sqrt(weights)
    coefficients, *_ = np.linalg.lstsq(fixed * root[:, None], d * root, rcond=None)
    residual = d - fixed @ coefficients
    contribution = (weights * residual * d).reshape(n_pools, n_periods).sum(axis=0)
    return contribution / contribution.sum()
