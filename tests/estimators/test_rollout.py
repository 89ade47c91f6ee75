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
