"""Assignment balance: the standardized mean difference, and what the draws do over many seeds."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from spillgauge import assign_design
from spillgauge.experiment.balance import (
    assignment_balance,
    balance_text,
    standardized_mean_difference,
)
from spillgauge.market.build import build_market
from tests.conftest import make_scenario


def test_smd_is_welch_t_rescaled_for_equal_arms():
    # Austin (2009): d = (mean_T - mean_C) / sqrt((s_T^2 + s_C^2) / 2). With n users per arm,
    # Welch's t = (mean_T - mean_C) / sqrt((s_T^2 + s_C^2) / n) (scipy), so d = t * sqrt(2 / n).
    rng = np.random.default_rng(4)
    treated, control = rng.gamma(2.0, 3.0, 50), rng.gamma(2.2, 3.0, 50)
    welch = stats.ttest_ind(treated, control, equal_var=False).statistic
    assert standardized_mean_difference(treated, control) == pytest.approx(
        welch * math.sqrt(2 / 50), rel=1e-12)


def test_smd_worked_by_hand():
    # means 3 and 2, sample variances 1 and 4 (ddof=1): d = 1 / sqrt(2.5) (worked on paper)
    assert standardized_mean_difference(np.array([2.0, 3.0, 4.0]),
                                        np.array([0.0, 2.0, 4.0])) == pytest.approx(
        1 / math.sqrt(2.5), rel=1e-12)
    assert math.isnan(standardized_mean_difference(np.array([1.0]), np.array([1.0, 2.0])))


@pytest.fixture(scope="module")
def scenario():
    return make_scenario(name="balance", calendar={"days": 2},
                         users={"count": 400, "history_days": 14}, pools={"count": 10},
                         design=[{"kind": "user", "share": 0.3},
                                 {"kind": "user", "randomization": "bernoulli",
                                  "label": "user-bernoulli"},
                                 {"kind": "cluster", "clusters": "pools"}])


SEEDS = range(200)


def test_complete_randomization_treats_exactly_the_share(scenario):
    market = build_market(scenario, 0)
    for seed in SEEDS[:20]:
        schedule = assign_design(scenario, "user", seed=seed, start="2027-03-01",
                                 market=market).schedule
        assert schedule.user_is_treated().sum() == round(0.3 * 400)


def test_bernoulli_share_and_pre_period_balance_over_seeds(scenario):
    market = build_market(scenario, 0)
    treated = rejections = 0
    for seed in SEEDS:
        assignment = assign_design(scenario, "user-bernoulli", seed=seed, start="2027-03-01",
                                   market=market)
        arm = assignment.schedule.user_is_treated()
        treated += int(arm.sum())
        # Under randomization the arms' pre-period orders differ only by chance: Welch's test
        # rejects at 5% in about 5% of draws (the randomization makes its null true).
        p = stats.ttest_ind(assignment.history[arm], assignment.history[~arm],
                            equal_var=False).pvalue
        rejections += p < 0.05
    assert stats.binomtest(treated, 400 * len(SEEDS), 0.5).pvalue > 1e-3
    assert stats.binomtest(rejections, len(SEEDS), 0.05).pvalue > 1e-3


def test_each_pool_is_treated_half_the_time(scenario):
    market = build_market(scenario, 0)
    counts = np.zeros(10)
    for seed in SEEDS:
        schedule = assign_design(scenario, "cluster-pools", seed=seed, start="2027-03-01",
                                 market=market).schedule
        assert schedule.is_treated.sum() == 5  # complete randomization of 10 pools
        counts += schedule.is_treated[:, 0]
    for count in counts:  # each pool: Binomial(200, 1/2) over seeds
        assert stats.binomtest(int(count), len(SEEDS), 0.5).pvalue > 1e-4


def test_balance_table_of_an_assignment(scenario):
    assignment = assign_design(scenario, "cluster-pools", seed=1, start="2027-03-01")
    balance = assignment_balance(assignment.schedule, assignment.history)
    arm = assignment.schedule.user_is_treated()
    assert balance.n_users == ((~arm).sum(), arm.sum())
    assert balance.n_units == (5, 5)
    assert balance.mean[1] == pytest.approx(assignment.history[arm].mean())
    assert balance.smd == standardized_mean_difference(assignment.history[arm],
                                                        assignment.history[~arm])
    text = balance_text(balance, "pool")
    assert "standardized mean difference" in text and "pools" in text
