"""Difference in differences for a staggered rollout, against statsmodels and by design."""

from __future__ import annotations

import numpy as np
import pytest

from spillgauge.designs import draw_rollout_schedule
from spillgauge.estimators import difference_in_differences
from spillgauge.panel import OutcomePanel


def _world(rng, n_pools=12, users=None, waves=3, ticks_per_period=5, effect=2.0):
    users = rng.integers(1, 5, size=n_pools) if users is None else users
    pool_of_user = np.repeat(np.arange(n_pools), users)
    n_ticks = (waves + 1) * ticks_per_period
    schedule = draw_rollout_schedule(pool_of_user, n_ticks, waves=waves, rng=rng)
    treated = schedule.unit_tick_treated()[pool_of_user]
    level = rng.poisson(3, size=pool_of_user.size)[:, None] + np.arange(n_ticks)[None, :] % 4
    per_tick = rng.poisson(level + effect * treated)
    panel = OutcomePanel.from_arrays(fulfilled=per_tick, pool_of_user=pool_of_user)
    return panel, schedule


def test_matches_statsmodels_weighted_twfe_with_cluster_robust_se(rng):
    # Two-way fixed effects by weighted least squares with pool-clustered errors: the
    # point and SE equal statsmodels' WLS(...).fit(cov_type="cluster") (reference library;
    # CR1 factor G/(G-1)(N-1)/(N-K), REFERENCES.md section 9), times the horizon in ticks.
    import statsmodels.api as sm

    panel, schedule = _world(rng)
    estimate = difference_in_differences(panel, schedule)
    lengths = schedule.period_lengths()
    users = panel.users_per_pool()
    period = schedule.period_of_tick()
    rows, y, w, groups = [], [], [], []
    for p in range(schedule.n_units):
        for k in range(schedule.n_periods):
            total = panel.pool_fulfilled[p, period == k].sum()
            y.append(total / (users[p] * lengths[k]))
            w.append(users[p] * lengths[k])
            row = np.zeros(schedule.n_units + schedule.n_periods)
            row[p] = 1
            if k:
                row[schedule.n_units + k - 1] = 1
            row[-1] = schedule.is_treated[p, k]
            rows.append(row)
            groups.append(p)
    fit = sm.WLS(np.array(y), np.array(rows), weights=np.array(w)).fit(
        cov_type="cluster", cov_kwds={"groups": np.array(groups)})
    assert estimate.point == pytest.approx(fit.params[-1] * schedule.n_ticks, rel=1e-9)
    assert estimate.standard_error == pytest.approx(fit.bse[-1] * schedule.n_ticks, rel=1e-9)


def test_unbiased_for_a_constant_effect_over_many_rollouts():
    # With a constant additive effect of 2 orders per user-tick and no interference, the
    # TWFE estimate is unbiased (common practice for staggered adoption with homogeneous
    # effects, no source): 2 x n_ticks = 40 on average, within 4 Monte Carlo SE.
    rng = np.random.default_rng(8)
    points = [difference_in_differences(*_world(rng)).point for _ in range(300)]
    se = np.std(points, ddof=1) / np.sqrt(len(points))
    assert abs(np.mean(points) - 40.0) < 4 * se


def test_rollout_schedule_rises_linearly_and_stays_on(rng):
    schedule = draw_rollout_schedule(np.arange(8), 40, waves=3, rng=rng)
    shares = schedule.is_treated.mean(axis=0)
    np.testing.assert_allclose(shares, [0, 0.25, 0.5, 0.75])  # linear in time (Xiong et al.)
    assert np.all(np.diff(schedule.is_treated.astype(int), axis=1) >= 0)  # never switches off
    with pytest.raises(ValueError, match="at least 4 pools"):
        draw_rollout_schedule(np.arange(3), 40, waves=3, rng=rng)


def _noise_free_rollout(rates_by_period, lift, users, waves=4, ticks_per_period=6,
                        pool_level=None, seed=0):
    """Pool-period orders per user-tick ``level_p + m_k (1 + lift D_pk)``, no noise."""
    from spillgauge.schedule import AssignmentSchedule

    rng = np.random.default_rng(seed)
    n_pools = users.size
    pool_of_user = np.repeat(np.arange(n_pools), users)
    n_ticks = (waves + 1) * ticks_per_period
    schedule = draw_rollout_schedule(pool_of_user, n_ticks, waves=waves, rng=rng)
    assert isinstance(schedule, AssignmentSchedule)
    level = np.zeros(n_pools) if pool_level is None else pool_level
    per_tick = (level[:, None] + np.repeat(rates_by_period, ticks_per_period)[None, :]
                * (1 + lift * schedule.unit_tick_treated()))
    pool_orders = per_tick * users[:, None]
    panel = OutcomePanel.from_arrays(
        fulfilled=np.zeros((users.sum(), 1), dtype=np.int64), pool_of_user=pool_of_user,
        pool_fulfilled=pool_orders, pool_demanded=pool_orders,
        pool_lost=np.zeros_like(pool_orders), pool_stock=np.zeros_like(pool_orders))
    return panel, schedule


def test_twfe_bias_is_goodman_bacon_period_weighting():
    # Goodman-Bacon (2021): with an effect tau_k that changes over periods (the same in
    # every pool) TWFE returns sum_k omega_k tau_k, omega_k = sum_p w D~ D / sum w D~ D with
    # D~ the arm residualized on pool and period effects (Frisch-Waugh-Lovell). The weights
    # are computed here with statsmodels' WLS, apart from the estimator; the GTE weighs each
    # period by its length instead, so TWFE's bias is T sum_k (omega_k - L_k/T) tau_k.
    import statsmodels.api as sm

    users = np.array([3, 5, 2, 4, 6, 3, 2, 5, 4, 3])
    m = np.array([1.0, 2.0, 0.5, 3.0, 1.5])          # control orders per user-tick by period
    lift = 0.4
    panel, schedule = _noise_free_rollout(m, lift, users,
                                          pool_level=np.linspace(0.0, 2.0, users.size))
    d = schedule.is_treated.astype(float)
    n_pools, n_periods = d.shape
    lengths = schedule.period_lengths().astype(float)
    pool = np.repeat(np.arange(n_pools), n_periods)
    period = np.tile(np.arange(n_periods), n_pools)
    dummies = np.column_stack([pool == p for p in range(n_pools)]
                              + [period == k for k in range(1, n_periods)]).astype(float)
    w = (users[:, None] * lengths[None, :]).ravel()
    d_tilde = sm.WLS(d.ravel(), dummies, weights=w).fit().resid
    omega = np.bincount(period, weights=w * d_tilde * d.ravel()) / np.sum(w * d_tilde * d.ravel())
    tau = lift * m                                    # effect per user-tick in each period
    horizon = schedule.n_ticks
    twfe = difference_in_differences(panel, schedule).point
    assert twfe == pytest.approx(horizon * omega @ tau, rel=1e-9)
    gte = lengths @ tau
    assert twfe - gte == pytest.approx(horizon * omega @ tau - gte, rel=1e-9)
    assert abs(twfe - gte) > 0.05 * gte               # the weights matter in this world
    from spillgauge.estimators import two_way_fixed_effects_period_weights
    assert two_way_fixed_effects_period_weights(schedule.is_treated, users, lengths) == \
        pytest.approx(omega, abs=1e-9)
    assert omega[0] == pytest.approx(0.0, abs=1e-12)  # the all-control period gets no weight


def test_staggered_is_exact_for_a_lift_that_multiplies_demand():
    # With orders m_k (1 + lift D) per user-tick (a lift multiplying a calendar that moves
    # period to period), each period's comparison gives lift m_k and the baseline is
    # extrapolated in proportion to its demand: the GTE lift sum_k L_k m_k exactly
    # (worked on paper from the estimator's documented formula).
    from spillgauge.estimators import staggered_difference_in_differences

    users = np.array([3, 5, 2, 4, 6, 3, 2, 5, 4, 3])
    m = np.array([1.0, 2.0, 0.5, 3.0, 1.5])
    panel, schedule = _noise_free_rollout(m, 0.4, users)
    lengths = schedule.period_lengths().astype(float)
    est = staggered_difference_in_differences(panel, schedule)
    assert est.point == pytest.approx(0.4 * lengths @ m, rel=1e-9)
    assert difference_in_differences(panel, schedule).point != pytest.approx(est.point,
                                                                            rel=0.01)
