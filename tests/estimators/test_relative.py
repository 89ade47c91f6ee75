"""The relative effect's delta-method SE, its Fieller interval and their calibration."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from spillgauge.estimators import difference_in_means, hajek_cluster
from spillgauge.estimators.relative import relative_effect
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule


def _user_schedule(is_treated):
    return AssignmentSchedule(unit_of_user=np.arange(is_treated.size),
                              is_treated=is_treated[:, None], period_start_ticks=[0], n_ticks=1,
                              treated_probability=0.5, randomization="complete")


def test_difference_in_means_relative_se_is_the_delta_method_by_hand():
    # Delta method for a ratio of two independent means (Casella & Berger 2002, sec. 5.5.4;
    # Deng, Knoblich & Lu 2018): R = T/C - 1, Var(R) = Var(T)/C^2 + T^2 Var(C)/C^4,
    # Var(T) = s1^2 / n1, Var(C) = s0^2 / n0; computed here from the arms alone.
    rng = np.random.default_rng(4)
    y = rng.poisson(rng.gamma(2.0, 1.0, 300))
    treated = rng.permutation(np.arange(300) < 150)
    est = difference_in_means(OutcomePanel.from_arrays(fulfilled=y), _user_schedule(treated))
    rel = relative_effect(est)
    t, c = y[treated].astype(float), y[~treated].astype(float)
    var = (t.var(ddof=1) / t.size / c.mean() ** 2
           + t.mean() ** 2 * c.var(ddof=1) / c.size / c.mean() ** 4)
    assert rel.point == pytest.approx(t.mean() / c.mean() - 1, rel=1e-12)
    assert rel.standard_error == pytest.approx(math.sqrt(var), rel=1e-12)
    # Fieller's interval (Fieller 1954): its ends are the relative effects theta at which the
    # z test of T - (1 + theta) C = 0 sits exactly at the quantile, with the arms independent:
    # |T - (1 + theta) C| = z sqrt(Var(T) + (1 + theta)^2 Var(C)); inside, below it.
    z = stats.norm.ppf(0.975)
    var_t, var_c = t.var(ddof=1) / t.size, c.var(ddof=1) / c.size

    def statistic(theta):
        return abs(t.mean() - (1 + theta) * c.mean()) / math.sqrt(var_t + (1 + theta) ** 2
                                                                   * var_c)

    assert statistic(rel.ci_low) == pytest.approx(z, rel=1e-9)
    assert statistic(rel.ci_high) == pytest.approx(z, rel=1e-9)
    assert statistic(rel.point) == pytest.approx(0.0, abs=1e-12)
    assert rel.ci_low < rel.point < rel.ci_high


def test_cluster_relative_se_matches_statsmodels_delta_on_cluster_means():
    # Equal clusters: the Hajek estimate is a difference of means of cluster means, and its
    # CR2 variance is the Neyman one on cluster means (see cr2_arm_difference), so the ratio's
    # delta-method SE must equal the one from statsmodels' Welch test's parts on cluster means
    # (statsmodels.stats.weightstats.DescrStatsW gives each arm's mean and its SE).
    from statsmodels.stats.weightstats import DescrStatsW

    rng = np.random.default_rng(9)
    clusters = np.repeat(np.arange(20), 15)
    y = rng.poisson(3.0 * rng.gamma(4.0, 0.25, 20)[clusters])
    treated_cluster = rng.permutation(np.arange(20) < 10)
    schedule = AssignmentSchedule(unit_of_user=clusters, is_treated=treated_cluster[:, None],
                                  period_start_ticks=[0], n_ticks=1, treated_probability=0.5,
                                  unit_kind="cluster", randomization="complete")
    rel = relative_effect(hajek_cluster(OutcomePanel.from_arrays(fulfilled=y), schedule))
    means = np.bincount(clusters, weights=y) / 15
    arm1, arm0 = DescrStatsW(means[treated_cluster]), DescrStatsW(means[~treated_cluster])
    t, c = arm1.mean, arm0.mean
    var = arm1.std_mean ** 2 / c ** 2 + t ** 2 * arm0.std_mean ** 2 / c ** 4
    assert rel.point == pytest.approx(t / c - 1, rel=1e-12)
    assert rel.standard_error == pytest.approx(math.sqrt(var), rel=1e-10)


def _coverage(n_draws, n_users, lift, rng):
    covered = 0
    for _ in range(n_draws):
        base = rng.gamma(2.0, 1.0, n_users)  # a new sample of users each draw
        treated = rng.permutation(np.arange(n_users) < n_users // 2)
        y = rng.poisson(base * np.where(treated, 1 + lift, 1.0))
        rel = relative_effect(difference_in_means(OutcomePanel.from_arrays(fulfilled=y),
                                                  _user_schedule(treated)))
        covered += rel.ci_low <= lift <= rel.ci_high  # superpopulation relative effect
    return covered


@pytest.mark.parametrize("lift", [0.0, 0.2])
def test_relative_interval_covers_the_relative_effect(lift):
    # Null and non-null calibration: coverage within binomial error of 95% (binomtest).
    covered = _coverage(600, 400, lift, np.random.default_rng(17 + int(lift * 10)))
    assert stats.binomtest(covered, 600, 0.95).pvalue > 0.001, covered


def test_fieller_interval_covers_where_the_control_mean_is_noisy():
    # Fieller (1954): with (D, C) jointly normal and their variances known, D - theta C is
    # normal with mean 0 at the true theta, so the set {theta : (D - theta C)^2 <= z^2
    # Var(D - theta C)} covers exactly 95%. Here the control mean has a 20% CV (a switchback's
    # few control blocks); coverage within binomial error of 95% (binomtest), draws with an
    # unbounded set (C within z SE of 0) counted as covering, as the set then holds every
    # theta but a bounded gap. (R +/- z se covered 94.6% here, 91.7% in a 16-day conversion
    # switchback under the null, where the control mean is noisier still.)
    from spillgauge.estimators.estimate import Estimate
    from spillgauge.estimators.relative import with_control_mean

    rng = np.random.default_rng(8)
    n, mu_t, mu_c, sd_t, sd_c = 4000, 1.3, 1.0, 0.15, 0.2
    theta = mu_t / mu_c - 1
    treated, control = rng.normal(mu_t, sd_t, n), rng.normal(mu_c, sd_c, n)
    covered = unbounded = 0
    for t, c in zip(treated, control):
        est = Estimate(point=t - c, standard_error=math.hypot(sd_t, sd_c), ci_low=0.0,
                       ci_high=0.0, method="difference_in_means", confidence=0.95)
        rel = relative_effect(with_control_mean(est, c, sd_c ** 2))
        if math.isnan(rel.ci_low):
            unbounded += 1
            covered += 1
            continue
        covered += rel.ci_low <= theta <= rel.ci_high
    assert unbounded < 0.01 * n
    assert stats.binomtest(covered, n, 0.95).pvalue > 0.001, covered / n


@pytest.mark.parametrize("seed", range(5))
def test_relative_interval_covers_zero_exactly_when_the_effects_interval_does(seed):
    # At theta = 0 Fieller's inequality is D^2 <= q^2 Var(D): the effect's own test. So under
    # the null the relative interval inherits the effect interval's calibration exactly
    # (derived on paper from the definition; Fieller 1954).
    from spillgauge.estimators.estimate import Estimate
    from spillgauge.estimators.relative import with_control_mean

    rng = np.random.default_rng(seed)
    for _ in range(200):
        # D = T - C with independent arms: Var(D) = Var(T) + Var(C), Cov(D, C) = -Var(C)
        c, se_c, se_t = rng.uniform(2, 5), rng.uniform(0.05, 0.6), rng.uniform(0.3, 1.5)
        d, se = rng.normal(0, 1), math.hypot(se_t, se_c)
        df = rng.choice([np.inf, 4.0, 12.0])
        q = stats.t.ppf(0.975, df)
        est = Estimate(point=d, standard_error=se, ci_low=d - q * se, ci_high=d + q * se,
                       method="m", confidence=0.95, degrees_of_freedom=df)
        rel = relative_effect(with_control_mean(est, c, se_c ** 2))
        assert (rel.ci_low <= 0 <= rel.ci_high) == (est.ci_low <= 0 <= est.ci_high)


_NULL_DESIGNS = {
    "none": [{"kind": "user"}, {"kind": "cluster", "clusters": "pools"},
             {"kind": "switchback", "per": "pool", "block_hours": 12},
             {"kind": "rollout", "waves": 2},
             {"kind": "rollout", "waves": 2, "label": "rollout-twfe",
              "estimator": "two_way_fixed_effects"}],
    "small_world": [{"kind": "cluster", "clusters": "graph", "exposure": "neighbourhood",
                     "label": "exposure-hajek"},
                    {"kind": "cluster", "clusters": "graph", "exposure": "neighbourhood",
                     "estimator": "horvitz_thompson", "label": "exposure-ht"},
                    {"kind": "interference_test", "clusters": "graph"}]}


@pytest.mark.slow
@pytest.mark.parametrize("graph", sorted(_NULL_DESIGNS))
def test_relative_interval_null_coverage_in_studies(graph):
    # Null calibration through the whole study (lift 0, no interference): each
    # replication's relative interval must cover the relative GTE (0) ~95% (binomtest).
    from spillgauge import run_study
    from tests.conftest import make_scenario

    scenario = make_scenario(calendar={"days": 3}, users={"count": 600},
                             pools={"count": 30, "stock_cover": 50.0},
                             graph={"model": graph, "mean_degree": 4},
                             effect={"lift": 0.0},
                             study={"reps": 400, "seed": 21, "outcome": "conversion"},
                             design=_NULL_DESIGNS[graph])
    study = run_study(scenario, workers=2)
    for label, design in study.designs.items():
        n = design.relative.n_reps
        covered = round(design.relative.coverage * n)
        absolute = round(design.metrics.coverage * design.metrics.n_reps)
        print(label, "relative coverage", covered, "/", n, "absolute", absolute, "/",
              design.metrics.n_reps)
        # At a relative truth of 0 Fieller's interval covers exactly when the effect's own
        # interval covers 0 (the GTE is 0 here), replication by replication; a replication
        # whose control mean is within q SE of 0 has no bounded relative interval (the
        # Horvitz-Thompson exposure design's conservative control-mean variance, mostly).
        for rep in study.replications:
            assert rep.truth.gte == 0.0
            estimate = rep.runs[label].estimate
            rel = relative_effect(estimate)
            if np.isfinite(rel.ci_low):
                assert (rel.ci_low <= 0 <= rel.ci_high) == (
                    estimate.ci_low <= 0 <= estimate.ci_high), (label, rep)
        if stats.binomtest(absolute, design.metrics.n_reps, 0.95).pvalue > 0.001 and n >= 100:
            assert stats.binomtest(covered, n, 0.95).pvalue > 0.001, (label, covered, n)


def _rollout(seed, n_pools=8, n_periods=4, ticks=6):
    rng = np.random.default_rng(seed)
    users = rng.integers(5, 15, n_pools)
    pool_of_user = np.repeat(np.arange(n_pools), users)
    switch = rng.permutation(np.repeat(np.arange(1, n_periods + 1), -(-n_pools // n_periods)))
    is_treated = np.arange(n_periods)[None, :] >= switch[:n_pools, None]
    n_ticks = n_periods * ticks
    period = np.arange(n_ticks) // ticks
    rate = rng.gamma(3.0, 0.1, pool_of_user.size)[:, None] * np.where(
        is_treated[pool_of_user][:, period], 1.2, 1.0)
    orders = rng.poisson(rate * np.ones((1, n_ticks)))
    panel = OutcomePanel.from_arrays(fulfilled=orders, pool_of_user=pool_of_user)
    schedule = AssignmentSchedule(unit_of_user=pool_of_user, is_treated=is_treated,
                                  period_start_ticks=np.arange(n_periods) * ticks,
                                  n_ticks=n_ticks, unit_kind="pool", randomization="complete")
    return panel, schedule, users, period


def test_two_way_fixed_effects_control_mean_is_statsmodels_contrast():
    # Reference library: statsmodels WLS with cov_type="cluster" (groups = pools; its default
    # small-sample factor G/(G-1) (N-1)/(N-K)) gives the coefficients and their covariance;
    # the control mean is the weighted mean of the fitted a_p + g_k (a linear contrast c),
    # so its variance is c'Vc and its covariance with tau is (Vc)_tau (Casella & Berger 2002,
    # sec. 4.5, variance of linear combinations), all times the horizon squared.
    import statsmodels.api as sm

    from spillgauge.estimators import difference_in_differences

    panel, schedule, users, period = _rollout(5)
    est = difference_in_differences(panel, schedule)
    n_pools, n_periods = schedule.is_treated.shape
    totals = np.zeros((n_pools, n_periods))
    np.add.at(totals.T, period, panel.pool_outcome.T.astype(float))
    lengths = schedule.period_lengths().astype(float)
    y = (totals / (users[:, None] * lengths[None, :])).ravel()
    w = (users[:, None] * lengths[None, :]).ravel()
    pool_index = np.repeat(np.arange(n_pools), n_periods)
    x = np.hstack([np.eye(n_pools)[pool_index],
                   np.eye(n_periods)[np.tile(np.arange(n_periods), n_pools)][:, 1:],
                   schedule.is_treated.ravel()[:, None].astype(float)])
    fit = sm.WLS(y, x, weights=w).fit(cov_type="cluster", cov_kwds={"groups": pool_index})
    c = w @ x / w.sum()
    c[-1] = 0.0
    horizon = float(schedule.n_ticks)
    v = fit.cov_params()
    assert est.point == pytest.approx(fit.params[-1] * horizon, rel=1e-9)
    assert est.control_mean == pytest.approx(c @ fit.params * horizon, rel=1e-9)
    assert est.control_mean_se == pytest.approx(math.sqrt(c @ v @ c) * horizon, rel=1e-8)
    assert est.control_covariance == pytest.approx((v @ c)[-1] * horizon ** 2, rel=1e-8)


def test_staggered_relative_effect_is_the_hour_weighted_relative_effect():
    # By its definition (Notes of staggered_difference_in_differences): the relative effect
    # is sum_k L_k tau_k / sum_k L_k Ybar_off,k when every period after the baseline is
    # identified and the baseline's hours get the same relative effect.
    from spillgauge.estimators import staggered_difference_in_differences

    panel, schedule, users, period = _rollout(6)
    rel = relative_effect(staggered_difference_in_differences(panel, schedule))
    totals = np.zeros(schedule.is_treated.shape)
    np.add.at(totals.T, period, panel.pool_outcome.T.astype(float))
    rates = totals / (users[:, None] * schedule.period_lengths()[None, :])
    taus, levels = [], []
    for k in range(1, rates.shape[1]):
        on = schedule.is_treated[:, k]
        if on.all() or not on.any():
            continue
        change = rates[:, k] - rates[:, 0]
        taus.append(users[on] @ change[on] / users[on].sum()
                    - users[~on] @ change[~on] / users[~on].sum())
        levels.append(users[~on] @ rates[~on, k] / users[~on].sum())
    assert rel.point == pytest.approx(np.sum(taus) / np.sum(levels), rel=1e-9)
    assert math.isfinite(rel.standard_error) and rel.standard_error > 0
