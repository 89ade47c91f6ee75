"""The relative effect's delta-method SE and the calibration of its interval."""

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
    z = stats.norm.ppf(0.975)
    assert rel.ci_high - rel.point == pytest.approx(z * math.sqrt(var), rel=1e-12)


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


@pytest.mark.slow
def test_relative_interval_null_coverage_in_studies():
    # Null calibration through the whole study (lift 0, no interference): each
    # replication's relative interval must cover the relative GTE (0) ~95% (binomtest).
    from spillgauge import run_study
    from tests.conftest import make_scenario

    scenario = make_scenario(calendar={"days": 3}, users={"count": 600},
                             pools={"count": 30, "stock_cover": 50.0}, graph={"model": "none"},
                             effect={"lift": 0.0},
                             study={"reps": 400, "seed": 21, "outcome": "conversion"},
                             design=[{"kind": "user"}, {"kind": "cluster", "clusters": "pools"}])
    study = run_study(scenario, workers=2)
    for label, design in study.designs.items():
        n = design.relative.n_reps
        covered = round(design.relative.coverage * n)
        print(label, "relative coverage", covered, "/", n)
        assert stats.binomtest(covered, n, 0.95).pvalue > 0.001, (label, covered, n)
