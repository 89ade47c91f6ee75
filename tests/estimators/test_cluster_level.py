"""Tests of estimators/cluster_level.py: Hajek and Horvitz-Thompson on cluster totals."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.estimators import hajek_cluster, horvitz_thompson_cluster
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule


def _cluster_schedule(cluster_of_user: np.ndarray, is_treated: np.ndarray, *,
                      randomization: str = "complete", p: float = 0.5) -> AssignmentSchedule:
    return AssignmentSchedule(unit_of_user=np.asarray(cluster_of_user),
                              is_treated=np.asarray(is_treated, dtype=bool)[:, None],
                              period_start_ticks=[0], n_ticks=1, treated_probability=p,
                              unit_kind="cluster", randomization=randomization)


@pytest.fixture
def twelve_clusters():
    # 12 clusters of unequal sizes, 6 treated (the set-up of REFERENCES §9's 12-cluster check;
    # its data are not given, so the check is the identity against statsmodels on our own data)
    rng = np.random.default_rng(9)
    sizes = rng.integers(2, 15, size=12)
    cluster = np.repeat(np.arange(12), sizes)
    is_treated = np.isin(np.arange(12), rng.permutation(12)[:6])
    outcome = rng.poisson(3.0 + 1.5 * is_treated[cluster] + rng.gamma(1.0, 1.0, 12)[cluster])
    return cluster, is_treated, outcome


def test_hajek_matches_statsmodels_cluster_robust_ols(twelve_clusters):
    # statsmodels OLS(y, [1, z]).fit(cov_type='cluster') uses CR1 = CR0 * G/(G-1) * (N-1)/(N-K)
    # (REFERENCES §9 / check 23, from statsmodels' sandwich_covariance source); hajek_cluster
    # documents CR0 * G/(G-1), so its variance is statsmodels' times (N-K)/(N-1), K = 2.
    cluster, is_treated, outcome = twelve_clusters
    est = hajek_cluster(OutcomePanel.from_arrays(fulfilled=outcome),
                        _cluster_schedule(cluster, is_treated))
    design = sm.add_constant(is_treated[cluster].astype(float))
    fit = sm.OLS(outcome.astype(float), design).fit(cov_type="cluster",
                                                    cov_kwds={"groups": cluster})
    n = outcome.size
    assert est.point == pytest.approx(fit.params[1], rel=1e-12)
    assert est.standard_error ** 2 == pytest.approx(fit.bse[1] ** 2 * (n - 2) / (n - 1),
                                                    rel=1e-10)
    assert est.n_units == 12
    # and without statsmodels' correction (CR0) the factor G/(G-1) is all that separates them
    fit0 = sm.OLS(outcome.astype(float), design).fit(
        cov_type="cluster", cov_kwds={"groups": cluster, "use_correction": False})
    assert est.standard_error ** 2 == pytest.approx(fit0.bse[1] ** 2 * 12 / 11, rel=1e-10)


def test_hajek_interval_uses_student_t_with_g_minus_2_df(twelve_clusters):
    # documented choice for few clusters (Cameron, Gelbach & Miller 2008): t with G - 2 df
    cluster, is_treated, outcome = twelve_clusters
    est = hajek_cluster(OutcomePanel.from_arrays(fulfilled=outcome),
                        _cluster_schedule(cluster, is_treated), confidence=0.9)
    half_width = stats.t.ppf(0.95, 10) * est.standard_error
    assert (est.ci_low, est.ci_high) == pytest.approx(
        (est.point - half_width, est.point + half_width), rel=1e-12)


def _potential_outcomes():
    # 5 clusters of sizes 1..4 and 2, outcomes depending only on the own cluster's arm
    cluster = np.repeat(np.arange(5), [1, 4, 2, 3, 2])
    y0 = np.array([2, 1, 0, 3, 5, 4, 1, 2, 2, 6, 0, 3])
    y1 = y0 + np.array([1, 0, 2, 2, 1, 3, 0, 4, 1, 2, 5, 1])
    return cluster, y0, y1


def _cluster_world(cluster, y0, y1, is_treated):
    return OutcomePanel.from_arrays(fulfilled=np.where(is_treated[cluster], y1, y0))


def test_horvitz_thompson_complete_randomization_by_enumeration():
    # Horvitz & Thompson (1952): unbiased for the GTE; with m of G clusters the estimator is
    # (G/N) x the difference in means of cluster totals, so Neyman (1923) gives
    # E[V-hat] = (G/N)^2 (S1^2/m + S0^2/(G-m)) >= Var exactly. All C(5, 2) = 10 assignments.
    cluster, y0, y1 = _potential_outcomes()
    n_users, n_clusters, m = y0.size, 5, 2
    points, variances = [], []
    for treated in itertools.combinations(range(n_clusters), m):
        is_treated = np.isin(np.arange(n_clusters), treated)
        est = horvitz_thompson_cluster(_cluster_world(cluster, y0, y1, is_treated),
                                       _cluster_schedule(cluster, is_treated))
        points.append(est.point)
        variances.append(est.standard_error ** 2)
    gte = np.mean(y1 - y0)
    assert np.mean(points) == pytest.approx(gte, abs=1e-10)
    totals0, totals1 = np.bincount(cluster, y0), np.bincount(cluster, y1)
    neyman = (n_clusters / n_users) ** 2 * (np.var(totals1, ddof=1) / m
                                            + np.var(totals0, ddof=1) / (n_clusters - m))
    assert np.mean(variances) == pytest.approx(neyman, abs=1e-10)
    exact = neyman - (n_clusters / n_users) ** 2 * np.var(totals1 - totals0, ddof=1) / n_clusters
    assert np.var(points) == pytest.approx(exact, abs=1e-10)
    assert np.mean(variances) >= np.var(points)


def test_horvitz_thompson_bernoulli_by_enumeration():
    # Bernoulli(p) clusters, all 2^5 assignments weighted by p^m (1-p)^(G-m): E[HT] = GTE
    # (Horvitz & Thompson 1952), and the documented conservative variance (Aronow & Samii 2017)
    # exceeds the exact variance by sum_g (T_g(1) - T_g(0))^2 / N^2 exactly (derived in the
    # module's Notes).
    cluster, y0, y1 = _potential_outcomes()
    p, n_clusters = 0.3, 5
    weights, points, variances = [], [], []
    for arms in itertools.product([False, True], repeat=n_clusters):
        is_treated = np.array(arms)
        est = horvitz_thompson_cluster(
            _cluster_world(cluster, y0, y1, is_treated),
            _cluster_schedule(cluster, is_treated, randomization="bernoulli", p=p))
        weights.append(p ** is_treated.sum() * (1 - p) ** (n_clusters - is_treated.sum()))
        points.append(est.point)
        variances.append(est.standard_error ** 2)
    weights, points = np.array(weights), np.array(points)
    mean = np.dot(weights, points)
    variance = np.dot(weights, (points - mean) ** 2)
    assert mean == pytest.approx(np.mean(y1 - y0), abs=1e-10)
    excess = np.sum((np.bincount(cluster, y1) - np.bincount(cluster, y0)) ** 2) / y0.size ** 2
    assert np.dot(weights, variances) == pytest.approx(variance + excess, abs=1e-10)


def test_equal_cluster_sizes_make_hajek_and_horvitz_thompson_agree():
    # with equal sizes n and p = m/G, (G/N)(mean_T T_g - mean_C T_g) = treated mean - control
    # mean (algebra), so both point estimates coincide
    rng = np.random.default_rng(21)
    cluster = np.repeat(np.arange(8), 5)
    is_treated = np.isin(np.arange(8), [0, 3, 4, 6])
    panel = OutcomePanel.from_arrays(fulfilled=rng.poisson(4.0, size=40))
    schedule = _cluster_schedule(cluster, is_treated)
    assert hajek_cluster(panel, schedule).point == pytest.approx(
        horvitz_thompson_cluster(panel, schedule).point, rel=1e-12)


def test_hajek_leaves_out_clusters_without_users():
    # cluster 4 has no user: same result as the schedule without it
    cluster = np.array([0, 0, 1, 1, 2, 2, 3, 3])
    panel = OutcomePanel.from_arrays(fulfilled=np.array([1, 3, 2, 2, 5, 7, 6, 4]))
    with_empty = hajek_cluster(panel, _cluster_schedule(cluster, [0, 0, 1, 1, 1]))
    without = hajek_cluster(panel, _cluster_schedule(cluster, [0, 0, 1, 1]))
    assert (with_empty.point, with_empty.standard_error, with_empty.n_units) == (
        without.point, without.standard_error, 4)


@pytest.mark.parametrize("estimator", [hajek_cluster, horvitz_thompson_cluster])
def test_single_treated_cluster_keeps_point_and_warns(estimator):
    cluster = np.array([0, 0, 1, 1, 2, 2])
    panel = OutcomePanel.from_arrays(fulfilled=np.array([1, 3, 2, 2, 5, 7]))
    with pytest.warns(DegenerateEstimateWarning, match="single cluster"):
        est = estimator(panel, _cluster_schedule(cluster, [0, 0, 1]))
    # by hand: Hajek 12/2 - 8/4 = 4; HT with p = 1/3: (12/(1/3) - 8/(2/3)) / 6 = 4
    assert est.point == pytest.approx(4.0, abs=1e-12)
    assert math.isnan(est.standard_error)


@pytest.mark.parametrize("estimator", [hajek_cluster, horvitz_thompson_cluster])
def test_empty_arm_returns_nan(estimator):
    cluster = np.array([0, 0, 1, 1, 2, 2])
    panel = OutcomePanel.from_arrays(fulfilled=np.array([1, 3, 2, 2, 5, 7]))
    with pytest.warns(DegenerateEstimateWarning):
        est = estimator(panel, _cluster_schedule(cluster, [1, 1, 1]))
    assert math.isnan(est.point) and math.isnan(est.ci_low)


def test_horvitz_thompson_needs_a_randomized_schedule():
    panel = OutcomePanel.from_arrays(fulfilled=np.arange(4))
    with pytest.raises(ValueError, match="randomized schedule"):
        horvitz_thompson_cluster(panel, AssignmentSchedule.fixed(n_users=4, n_ticks=1,
                                                                 is_treated=True))
    schedule = _cluster_schedule(np.array([0, 0, 1, 1]), [0, 1], randomization="bernoulli",
                                 p=float("nan"))
    with pytest.raises(ValueError, match="treated_probability"):
        horvitz_thompson_cluster(panel, schedule)
