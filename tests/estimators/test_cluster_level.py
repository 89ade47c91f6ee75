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


def _cr2_by_matrices(outcome, cluster, is_treated):
    """CR2 variance and Bell-McCaffrey df of the slope of OLS(y ~ 1 + z), by their definitions.

    Bell & McCaffrey (2002): V = B [sum_g X_g' A_g e_g e_g' A_g X_g] B with B = (X'X)^-1 and
    A_g = (I - H_gg)^(-1/2); with V = y'My (M = sum_g v_g v_g', v_g = (I - H)_g' A_g X_g B c)
    the degrees of freedom under the working model Var(y) = I are tr(M)^2 / tr(M^2)
    (Imbens & Kolesar 2016, Section 4). Written with dense matrices, independently of the
    estimator's closed form.
    """
    from scipy.linalg import sqrtm

    z = is_treated[cluster].astype(float)
    x = np.column_stack([np.ones_like(z), z])
    bread = np.linalg.inv(x.T @ x)
    hat = x @ bread @ x.T
    residual = outcome - hat @ outcome
    contrast = np.array([0.0, 1.0])
    m = np.zeros((outcome.size, outcome.size))
    meat = np.zeros((2, 2))
    for g in np.unique(cluster):
        rows = cluster == g
        adjust = np.real(sqrtm(np.linalg.inv(np.eye(rows.sum()) - hat[np.ix_(rows, rows)])))
        score = x[rows].T @ adjust @ residual[rows]
        meat += np.outer(score, score)
        v = (np.eye(outcome.size) - hat)[rows].T @ adjust @ x[rows] @ bread @ contrast
        m += np.outer(v, v)
    variance = float((bread @ meat @ bread)[1, 1])
    return variance, np.trace(m) ** 2 / np.trace(m @ m)


def test_hajek_matches_statsmodels_point_and_cr2_by_its_definition(twelve_clusters):
    # The Hajek point is statsmodels' OLS slope of y ~ 1 + z. Its variance is CR2 (Bell &
    # McCaffrey 2002), which statsmodels does not offer: it is checked against the dense
    # matrix definition above, whose code is in turn checked by giving statsmodels' CR0
    # (cov_type="cluster", use_correction=False) when every A_g is the identity.
    cluster, is_treated, outcome = twelve_clusters
    est = hajek_cluster(OutcomePanel.from_arrays(fulfilled=outcome),
                        _cluster_schedule(cluster, is_treated))
    y = outcome.astype(float)
    design = sm.add_constant(is_treated[cluster].astype(float))
    fit0 = sm.OLS(y, design).fit(cov_type="cluster",
                                 cov_kwds={"groups": cluster, "use_correction": False})
    assert est.point == pytest.approx(fit0.params[1], rel=1e-12)
    variance, df = _cr2_by_matrices(y, cluster, is_treated)
    assert est.standard_error ** 2 == pytest.approx(variance, rel=1e-9)
    assert est.degrees_of_freedom == pytest.approx(df, rel=1e-9)
    assert est.n_units == 12
    # the matrix code without the adjustment is statsmodels' CR0
    bread = np.linalg.inv(design.T @ design)
    scores = np.zeros((12, 2))
    np.add.at(scores, cluster, design * fit0.resid[:, None])
    cr0 = (bread @ scores.T @ scores @ bread)[1, 1]
    assert cr0 == pytest.approx(fit0.bse[1] ** 2, rel=1e-10)
    assert variance > cr0 * 12 / 11  # CR2 exceeds CR1's pooled factor with few clusters


def test_hajek_cr2_with_equal_clusters_is_per_arm_neyman_with_g_minus_2_df():
    # Equal clusters: CR2 = s1^2/G1 + s0^2/G0 on cluster means and the Bell-McCaffrey df is
    # G - 2 for equal arms (Imbens & Kolesar 2016, the balanced case; worked by hand in
    # cr2_arm_difference's docstring); the interval is t with those df.
    rng = np.random.default_rng(3)
    cluster = np.repeat(np.arange(8), 5)
    is_treated = np.isin(np.arange(8), [0, 2, 5, 7])
    outcome = rng.poisson(4.0, 40)
    est = hajek_cluster(OutcomePanel.from_arrays(fulfilled=outcome),
                        _cluster_schedule(cluster, is_treated), confidence=0.9)
    means = np.bincount(cluster, weights=outcome) / 5
    neyman = np.var(means[is_treated], ddof=1) / 4 + np.var(means[~is_treated], ddof=1) / 4
    assert est.standard_error ** 2 == pytest.approx(neyman, rel=1e-12)
    assert est.degrees_of_freedom == pytest.approx(6.0, rel=1e-12)
    half_width = stats.t.ppf(0.95, 6) * est.standard_error
    assert (est.ci_low, est.ci_high) == pytest.approx(
        (est.point - half_width, est.point + half_width), rel=1e-12)
    # the p-value is the t test's (scipy.stats.ttest_ind with equal_var=False on cluster
    # means has the same statistic; its df differ, so only the statistic is compared)
    welch = stats.ttest_ind(means[is_treated], means[~is_treated], equal_var=False)
    assert est.point / est.standard_error == pytest.approx(welch.statistic, rel=1e-12)
    assert est.p_value == pytest.approx(2 * stats.t.sf(abs(welch.statistic), 6), rel=1e-12)


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


def test_hajek_cr2_is_unbiased_for_the_exact_randomization_variance():
    # Sharp null, 10 equal clusters, 5 treated: enumerate all 252 assignments. The point's
    # randomization variance is S^2 (1/G1 + 1/G0) on cluster means, and the Neyman variance
    # (= CR2 here) has exactly that expectation over the assignments (Neyman 1923; Imbens &
    # Rubin 2015, Theorem 6.2). The pooled factor G/(G-1) would give (G-2)/(G-1) of it.
    rng = np.random.default_rng(11)
    cluster = np.repeat(np.arange(10), 6)
    outcome = rng.poisson(rng.gamma(2.0, 2.0, 10)[cluster])
    panel = OutcomePanel.from_arrays(fulfilled=outcome)
    points, variances = [], []
    for treated in itertools.combinations(range(10), 5):
        est = hajek_cluster(panel, _cluster_schedule(cluster, np.isin(np.arange(10), treated)))
        points.append(est.point)
        variances.append(est.standard_error ** 2)
    assert np.mean(points) == pytest.approx(0.0, abs=1e-12)
    assert np.mean(variances) == pytest.approx(np.var(points), rel=1e-10)
    # and the t interval's rejection rate over the enumeration is close to its level: the
    # exact share of assignments whose 95% interval misses 0 (Fisher's sharp null)
    misses = np.mean([abs(p) / np.sqrt(v) > stats.t.ppf(0.975, 8)
                      for p, v in zip(points, variances)])
    assert misses <= 0.05 + 2 * np.sqrt(0.05 * 0.95 / 252)
