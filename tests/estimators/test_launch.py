"""Launch estimators on pool-day series: synthetic control weights, DiD and pre/post by hand."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize

from spillgauge.designs.regional_launch import draw_regional_launch_schedule
from spillgauge.estimators.launch import (
    launch_difference_in_differences,
    pre_post_difference,
    synthetic_control,
    synthetic_control_weights,
)
from spillgauge.panel import OutcomePanel


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_synthetic_control_weights_equal_an_independent_constrained_least_squares(seed):
    # The same problem solved by a general-purpose solver: scipy.optimize.minimize (SLSQP)
    # of ||y - X'w||^2 subject to w >= 0 and sum w = 1 (Abadie, Diamond & Hainmueller 2010).
    rng = np.random.default_rng(seed)
    donors = rng.gamma(2.0, 1.0, size=(8, 12))
    target = 0.6 * donors[1] + 0.4 * donors[5] + rng.normal(0, 0.3, 12)  # not exactly a mix
    ours = synthetic_control_weights(target, donors)
    reference = optimize.minimize(
        lambda w: np.sum((target - w @ donors) ** 2), np.full(8, 1 / 8), method="SLSQP",
        jac=lambda w: -2 * donors @ (target - w @ donors), bounds=[(0, None)] * 8,
        constraints=[{"type": "eq", "fun": lambda w: w.sum() - 1}],
        options={"ftol": 1e-14, "maxiter": 1000}).x
    assert ours.min() >= 0 and ours.sum() == pytest.approx(1.0, abs=1e-12)
    np.testing.assert_allclose(ours, reference, atol=1e-5)


def test_synthetic_control_weights_recover_an_exact_convex_mix():
    # A treated series that is exactly 0.2 a + 0.3 b + 0.5 c of three donors among six is
    # fitted with zero error by those weights, the unique solution when the donors' series
    # are linearly independent (worked by hand).
    rng = np.random.default_rng(4)
    donors = rng.normal(size=(6, 20))
    target = 0.2 * donors[0] + 0.3 * donors[2] + 0.5 * donors[4]
    np.testing.assert_allclose(synthetic_control_weights(target, donors),
                               [0.2, 0, 0.3, 0, 0.5, 0], atol=1e-7)


def _launch_panel(daily: np.ndarray, users: np.ndarray, launched: np.ndarray, launch_day: int):
    """One user row per pool-user, equal daily orders inside a pool (per-user series given)."""
    pool_of_user = np.repeat(np.arange(daily.shape[0]), users)
    panel = OutcomePanel.from_arrays(fulfilled=daily[pool_of_user] , pool_of_user=pool_of_user,
                                     tick_hours=24)
    demand = np.where(launched, 1.0, 0.0)
    schedule = draw_regional_launch_schedule(pool_of_user, demand, daily.shape[1],
                                             pools=int(launched.sum()), choose="largest",
                                             launch_tick=launch_day, rng=np.random.default_rng(0))
    return panel, schedule


def test_did_and_pre_post_by_hand():
    # Four pools, two launched, 2 days before and 2 after. Per-user daily orders: launched
    # pools rise by 3 and 5, the others by 1 and 1. Pre/post: mean change 4 per day x 2 post
    # days = 8; DiD: (4 - 1) x 2 = 6 (worked by hand; users per pool 1, 1, 2, 2 change
    # nothing since the changes inside each group are weighted by users: (3 + 5)/2 = 4
    # for pools of one user each).
    daily = np.array([[1, 1, 4, 4], [2, 2, 7, 7], [3, 3, 4, 4], [1, 1, 2, 2]])
    panel, schedule = _launch_panel(daily, np.array([1, 1, 2, 2]),
                                    np.array([True, True, False, False]), 2)
    assert pre_post_difference(panel, schedule).point == pytest.approx(8.0)
    did = launch_difference_in_differences(panel, schedule)
    assert did.point == pytest.approx(6.0)
    # Cluster variance of each group's mean change: launched changes 3, 5 (mean 4):
    # 2/1 x (1/4 + 1/4) = 1, x 2^2 post days = 4; others change 1, 1: 0. SE = 2.
    assert did.standard_error == pytest.approx(2.0)


def _pool_total_panel(series: np.ndarray, launched: np.ndarray, launch_day: int,
                      users_per_pool: int = 1000):
    """A panel whose pools' per-user daily series are ``series`` (to 1 / users_per_pool)."""
    n_pools, n_days = series.shape
    pool_of_user = np.repeat(np.arange(n_pools), users_per_pool)
    orders = np.rint(series * users_per_pool).astype(np.int64)
    panel = OutcomePanel.from_arrays(
        fulfilled=np.zeros((pool_of_user.size, 1), dtype=np.int64), pool_of_user=pool_of_user,
        pool_fulfilled=orders, pool_demanded=orders, pool_lost=np.zeros_like(orders),
        pool_stock=np.zeros_like(orders), tick_hours=24)
    schedule = draw_regional_launch_schedule(pool_of_user, np.where(launched, 1.0, 0.0), n_days,
                                             pools=int(launched.sum()), choose="largest",
                                             launch_tick=launch_day, rng=np.random.default_rng(0))
    return panel, schedule


def test_synthetic_control_on_a_noiseless_factor_model_is_exact_and_most_extreme():
    # Launched pool = 0.5 donor 0 + 0.5 donor 1 before the launch, +2 per day after; donors
    # follow different trends (interactive fixed effects). Synthetic control recovers 2 per day
    # x 3 post days = 6 (to the 1/1000 rounding of orders per user), and its post/pre RMSPE
    # ratio (pre fit ~0) ranks first among the placebo launches of each other pool: with every
    # set listed, p = 1 / (1 + 4) (Abadie, Diamond & Hainmueller 2010, section 2.4; Firpo &
    # Possebom 2018).
    days = np.arange(8.0)
    donors = np.array([1 + 0.3 * days, 3 - 0.1 * days, 2 + 0.05 * days ** 1.5,
                       2 + np.sin(days)])
    launched = 0.5 * donors[0] + 0.5 * donors[1] + np.where(days >= 5, 2.0, 0.0)
    panel, schedule = _pool_total_panel(np.vstack([launched, donors]),
                                        np.array([True, False, False, False, False]), 5)
    estimate = synthetic_control(panel, schedule)
    assert estimate.point == pytest.approx(6.0, abs=0.01)
    assert estimate.p_value == pytest.approx(1 / 5)


def test_control_mean_is_each_estimators_counterfactual_level_by_hand():
    # The relative effect divides by the launched pools' counterfactual post-launch level:
    # pre/post, their pre level scaled to the post days; DiD, that level plus the other
    # pools' change; synthetic control, the weighted donors' post orders (Abadie, Diamond &
    # Hainmueller 2010); each is observed post level minus the effect, so its variance is
    # the effect's and their covariance minus it (worked by hand from the definitions).
    from spillgauge.estimators import (
        launch_difference_in_differences,
        pre_post_difference,
        synthetic_control,
    )
    from spillgauge.estimators.launch import (
        group_series,
        pool_day_series,
        synthetic_control_weights,
    )
    from tests.calibration.launch_worlds import launch_world

    panel, schedule, _ = launch_world(rng=np.random.default_rng(4), lift=0.1)
    series, users, launched, n_pre = pool_day_series(panel, schedule, "test")
    n_post = series.shape[1] - n_pre
    target = group_series(series, users, launched)
    others = group_series(series, users, ~launched)
    weights = synthetic_control_weights(target[:n_pre], series[~launched, :n_pre])
    expected = {
        pre_post_difference: target[:n_pre].mean() * n_post,
        launch_difference_in_differences:
            (target[:n_pre].mean() + others[n_pre:].mean() - others[:n_pre].mean()) * n_post,
        synthetic_control: (weights @ series[~launched, n_pre:]).sum(),
    }
    for function, level in expected.items():
        estimate = function(panel, schedule)
        assert estimate.control_mean == pytest.approx(level, rel=1e-9), function.__name__
        assert estimate.control_mean_se == pytest.approx(estimate.standard_error, rel=1e-12)
        assert estimate.control_covariance == pytest.approx(-estimate.standard_error ** 2,
                                                            rel=1e-12)
