"""Tests of estimators/user_level.py: difference in means and CUPED."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import stats

from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.estimators import difference_in_means, regression_adjusted_difference
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule


def _user_schedule(is_treated: np.ndarray) -> AssignmentSchedule:
    is_treated = np.asarray(is_treated, dtype=bool)
    return AssignmentSchedule(unit_of_user=np.arange(is_treated.size),
                              is_treated=is_treated[:, None], period_start_ticks=[0],
                              n_ticks=1, treated_probability=0.5, randomization="complete")


def test_hand_case_point_and_se():
    # STYLE.md §8 hand-worked case: outcomes 1..6, last three treated -> point 3, SE sqrt(2/3)
    panel = OutcomePanel.from_arrays(fulfilled=np.arange(1, 7))
    est = difference_in_means(panel, _user_schedule([0, 0, 0, 1, 1, 1]))
    assert est.point == pytest.approx(3.0, abs=1e-12)
    assert est.standard_error == pytest.approx(math.sqrt(2 / 3), abs=1e-12)
    assert est.method == "difference_in_means" and est.n_units == 6


def test_point_over_se_is_welch_statistic_of_scipy():
    # scipy.stats.ttest_ind(equal_var=False): Welch's t = (mean1 - mean0) / sqrt(s1^2/n1 + s0^2/n0)
    rng = np.random.default_rng(11)
    outcome = rng.poisson(3.0, size=57)
    is_treated = rng.random(57) < 0.4
    est = difference_in_means(OutcomePanel.from_arrays(fulfilled=outcome),
                              _user_schedule(is_treated))
    welch = stats.ttest_ind(outcome[is_treated], outcome[~is_treated], equal_var=False)
    assert est.point / est.standard_error == pytest.approx(welch.statistic, rel=1e-12)


def test_interval_is_normal_approximation():
    # point +/- z_{(1+c)/2} se with z from scipy.stats.norm (the documented interval)
    rng = np.random.default_rng(12)
    panel = OutcomePanel.from_arrays(fulfilled=rng.poisson(5.0, size=40))
    est = difference_in_means(panel, _user_schedule(np.arange(40) % 2 == 0), confidence=0.9)
    low, high = stats.norm.interval(0.9, loc=est.point, scale=est.standard_error)
    assert (est.ci_low, est.ci_high) == pytest.approx((low, high), rel=1e-12)


def test_neyman_variance_by_enumeration():
    # REFERENCES §9 / check 22 (Neyman 1923; Imbens & Rubin 2015 ch. 6), [CALC] values:
    # n = 6, n1 = 3, Y(0) = (1,3,2,5,4,6), tau = (1,2,0,3,1,2): over all 20 complete
    # randomizations E[DM] = 1.5, Var(DM) = 3.383333, E[V-hat] = 3.566667.
    y0 = np.array([1, 3, 2, 5, 4, 6])
    y1 = y0 + np.array([1, 2, 0, 3, 1, 2])
    points, variances = [], []
    for treated in itertools.combinations(range(6), 3):
        is_treated = np.isin(np.arange(6), treated)
        panel = OutcomePanel.from_arrays(fulfilled=np.where(is_treated, y1, y0))
        est = difference_in_means(panel, _user_schedule(is_treated))
        points.append(est.point)
        variances.append(est.standard_error ** 2)
    assert len(points) == 20
    assert np.mean(points) == pytest.approx(1.5, abs=1e-10)
    assert np.var(points) == pytest.approx(3.383333, abs=5e-7)
    assert np.mean(variances) == pytest.approx(3.566667, abs=5e-7)
    # Neyman's closed form S1^2/n1 + S0^2/n0 - S_tau^2/n gives the same variance exactly
    closed = np.var(y1, ddof=1) / 3 + np.var(y0, ddof=1) / 3 - np.var(y1 - y0, ddof=1) / 6
    assert np.var(points) == pytest.approx(closed, abs=1e-10)


def test_empty_arm_returns_nan_and_warns():
    panel = OutcomePanel.from_arrays(fulfilled=np.arange(4))
    with pytest.warns(DegenerateEstimateWarning, match="control arm"):
        est = difference_in_means(panel, _user_schedule([1, 1, 1, 1]))
    assert math.isnan(est.point) and math.isnan(est.standard_error) and math.isnan(est.ci_low)


def test_single_user_arm_keeps_point_but_not_se():
    panel = OutcomePanel.from_arrays(fulfilled=np.array([1, 2, 3, 7]))
    with pytest.warns(DegenerateEstimateWarning, match="single user"):
        est = difference_in_means(panel, _user_schedule([0, 0, 0, 1]))
    assert est.point == pytest.approx(5.0)  # 7 - mean(1, 2, 3), by hand
    assert math.isnan(est.standard_error) and math.isnan(est.ci_high)


@pytest.mark.parametrize("estimator", [difference_in_means, regression_adjusted_difference])
def test_switchback_schedule_is_rejected(estimator):
    schedule = AssignmentSchedule(unit_of_user=np.zeros(3, int),
                                  is_treated=np.array([[1, 0]], bool), period_start_ticks=[0, 1],
                                  n_ticks=2, unit_kind="market", randomization="complete",
                                  treated_probability=0.5)
    panel = OutcomePanel.from_arrays(fulfilled=np.ones((3, 2), int))
    with pytest.raises(ValueError, match="static schedule"):
        estimator(panel, schedule)


def test_cuped_theta_is_pooled_ols_slope():
    # Deng et al. (2013): theta = Cov(Y, X) / Var(X), the pooled OLS slope (numpy.polyfit).
    rng = np.random.default_rng(13)
    history = rng.gamma(2.0, 3.0, size=200)
    outcome = rng.poisson(1.0 + 0.8 * history)
    is_treated = rng.random(200) < 0.5
    panel = OutcomePanel.from_arrays(fulfilled=outcome, history=history)
    est = regression_adjusted_difference(panel, _user_schedule(is_treated))
    slope = np.polyfit(history, outcome.astype(float), 1)[0]
    adjusted = outcome - slope * (history - history.mean())
    expected_point = adjusted[is_treated].mean() - adjusted[~is_treated].mean()
    expected_se = stats.ttest_ind(adjusted[is_treated], adjusted[~is_treated],
                                  equal_var=False)
    assert est.point == pytest.approx(expected_point, abs=1e-10)
    assert est.point / est.standard_error == pytest.approx(expected_se.statistic, rel=1e-10)
    assert est.method == "regression_adjusted_difference"


def test_cuped_without_history_variance_equals_difference_in_means():
    rng = np.random.default_rng(14)
    panel = OutcomePanel.from_arrays(fulfilled=rng.poisson(4.0, size=30))  # history all zeros
    schedule = _user_schedule(np.arange(30) < 12)
    plain = difference_in_means(panel, schedule)
    adjusted = regression_adjusted_difference(panel, schedule)
    assert (adjusted.point, adjusted.standard_error, adjusted.ci_low, adjusted.ci_high) == (
        plain.point, plain.standard_error, plain.ci_low, plain.ci_high)
    assert adjusted.method == "regression_adjusted_difference"


def _correlated_population(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    # X = A + B, Y0 = A + C with A ~ Poi(49), B, C ~ Poi(21): Cov = 49, Var X = Var Y = 70,
    # so rho = 49 / 70 = 0.7 exactly (derived here), and outcomes stay integer counts.
    shared = rng.poisson(49, n)
    return shared + rng.poisson(21, n), (shared + rng.poisson(21, n)).astype(float)


def test_cuped_estimated_variance_shrinks_by_one_minus_rho_squared():
    # Deng et al. (2013): Var(Delta_cv) = Var(Delta) (1 - rho^2) = 0.51 at rho = 0.7, here on
    # the estimated variances at n = 20000. SE of 1 - r^2 is about 2 rho (1 - rho^2)/sqrt(n)
    # (delta method on the sample correlation) = 0.0050; tolerance 4 SE = 0.02.
    rng = np.random.default_rng(2013)
    n = 20_000
    outcome, history = _correlated_population(rng, n)
    is_treated = np.zeros(n, dtype=bool)
    is_treated[rng.permutation(n)[: n // 2]] = True
    panel = OutcomePanel.from_arrays(fulfilled=outcome + 2 * is_treated, history=history)
    schedule = _user_schedule(is_treated)
    ratio = (regression_adjusted_difference(panel, schedule).standard_error
             / difference_in_means(panel, schedule).standard_error) ** 2
    assert ratio == pytest.approx(0.51, abs=0.02)


def test_cuped_sampling_variance_ratio_and_unbiasedness_monte_carlo():
    # Deng et al. (2013): Var(Delta_cv) / Var(Delta) -> 1 - rho^2 = 0.51 and E[Delta_cv] = tau
    # when X is pre-period. 2000 replications of n = 2000 (n kept small so the test is fast);
    # tolerance 4 Monte Carlo SE, the ratio's SE by the delta method over replications.
    rng = np.random.default_rng(20130207)
    n, n_reps, effect = 2_000, 2_000, 2
    plain, adjusted = np.empty(n_reps), np.empty(n_reps)
    for rep in range(n_reps):
        outcome, history = _correlated_population(rng, n)
        is_treated = np.zeros(n, dtype=bool)
        is_treated[rng.permutation(n)[: n // 2]] = True
        panel = OutcomePanel.from_arrays(fulfilled=outcome + effect * is_treated, history=history)
        schedule = _user_schedule(is_treated)
        plain[rep] = difference_in_means(panel, schedule).point
        adjusted[rep] = regression_adjusted_difference(panel, schedule).point
    sq_adjusted, sq_plain = (adjusted - adjusted.mean()) ** 2, (plain - plain.mean()) ** 2
    ratio = sq_adjusted.mean() / sq_plain.mean()
    influence = (sq_adjusted - ratio * sq_plain) / sq_plain.mean()
    ratio_se = influence.std(ddof=1) / math.sqrt(n_reps)
    assert abs(ratio - 0.51) <= 4 * ratio_se
    assert abs(adjusted.mean() - effect) <= 4 * adjusted.std(ddof=1) / math.sqrt(n_reps)
