"""The study's designs in the simulated market against published results on interference."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from spillgauge.study.run import run_study
from tests.conftest import make_scenario


def _metrics(study, label):
    return study.metrics[label]


def test_linear_in_means_spillover_user_vs_cluster():
    # Linear-in-means spillover (Manski 1993; analysed by Eckles, Karrer & Ugander 2017):
    # with ample stock, peer_lift g, lift t and Bernoulli(1/2) users, the user-level
    # difference in means converges to b*t*(1+g/2) while the GTE is b*((1+t)(1+g)-1),
    # b = base orders per user over the horizon. With disjoint communities as clusters the
    # cluster design is unbiased.
    t, g = 0.2, 0.6
    scenario = make_scenario(
        users={"count": 3000, "orders_per_week": 3.0, "history_days": 0},
        pools={"count": 2, "stock_cover": 500.0}, calendar={"days": 14},
        graph={"model": "communities", "community_count": 100, "within_community_share": 1.0,
               "mean_degree": 8},
        effect={"lift": t, "peer_lift": g},
        design=[{"kind": "user", "randomization": "bernoulli"},
                {"kind": "cluster", "clusters": "graph"}],
        study={"reps": 60, "seed": 4})
    study = run_study(scenario, workers=1)
    from spillgauge.market.build import build_market

    market = build_market(scenario, 4)
    connected = market.degree() > 0
    base = market.population.rate_per_hour * 14 * 24
    b_connected = base[connected].sum() / market.n_users
    b_isolated = base[~connected].sum() / market.n_users
    # isolated users (no neighbours) get no peer term: they contribute b*t to both.
    gte = b_connected * ((1 + t) * (1 + g) - 1) + b_isolated * t
    user_limit = b_connected * t * (1 + g / 2) + b_isolated * t
    truth_se = study.truth.gte_se
    assert abs(study.truth.gte - gte) < 4 * truth_se + 0.01 * gte
    user = _metrics(study, "user")
    assert abs(user.mean_estimate - user_limit) < 4 * user.mean_estimate_se
    cluster = _metrics(study, "cluster-graph")
    assert abs(cluster.bias) < 4 * cluster.bias_se
    assert user.bias < -10 * user.bias_se  # the user-level design misses the peer effect


def test_no_interference_power_and_coverage_match_two_sample_theory():
    # Without interference the user-level difference in means is a two-sample z-test: its
    # power at the simulated effect size matches statsmodels' NormalIndPower within Monte
    # Carlo error, and 95% intervals cover about 95% of the time (binomial tolerance).
    from statsmodels.stats.power import NormalIndPower

    scenario = make_scenario(
        users={"count": 600, "orders_per_week": 1.0, "rate_shape": 4.0, "history_days": 0},
        pools={"count": 2, "stock_cover": 500.0}, calendar={"days": 7},
        effect={"lift": 0.15}, design=[{"kind": "user"}], study={"reps": 400, "seed": 9})
    study = run_study(scenario, workers=2)
    frame = study.replications_frame()
    user = _metrics(study, "user")
    # effect size in SD units of one user's outcome: GTE / (SE * sqrt(n/2)) with n/2 per arm
    n_arm = 300
    sd_unit = frame["se"].mean() / np.sqrt(2 / n_arm)
    effect_size = study.truth.gte / sd_unit
    expected_power = NormalIndPower().power(effect_size, nobs1=n_arm, alpha=0.05)
    assert abs(user.power - expected_power) < 4 * np.sqrt(expected_power * (1 - expected_power)
                                                          / study.reps) + 0.03
    covered = int(round(user.coverage * study.reps))
    assert stats.binomtest(covered, study.reps, 0.95).pvalue > 1e-3


def test_switchback_burn_in_removes_carryover_bias():
    # Switchback with carryover (Bojinov, Simchi-Levi & Zhao 2023): with a burn-in at least
    # as long as the carryover the estimate is unbiased; without one it is biased toward
    # zero (the control blocks right after a treated block still carry its lift).
    scenario = make_scenario(
        users={"count": 3000, "orders_per_week": 4.0, "history_days": 0},
        pools={"count": 1, "stock_cover": 500.0}, calendar={"days": 28},
        effect={"lift": 0.5, "carryover_half_life_hours": 1.5},
        design=[{"kind": "switchback", "block_hours": 12},
                {"kind": "switchback", "block_hours": 12, "burn_in_hours": 10}],
        study={"reps": 80, "seed": 21})
    study = run_study(scenario, workers=2)
    plain = _metrics(study, "switchback-12h")
    burned = _metrics(study, "switchback-12h-burn10h")
    assert plain.bias < -4 * plain.bias_se
    assert abs(burned.bias) < 4 * burned.bias_se


@pytest.mark.parametrize("cover, interference", [(1.0, True), (50.0, False)])
def test_interference_test_detects_stock_out_spillover(cover, interference):
    # Saveski et al. (2017): randomizing half the clusters by user and half whole, the two
    # estimates agree without interference (rejection at about alpha) and disagree when
    # shared stock binds; with binding stock the user half overstates the effect (a winning
    # variant buys out the control group's shelf: common practice, no source).
    scenario = make_scenario(
        users={"count": 3000, "orders_per_week": 3.0, "history_days": 0},
        pools={"count": 40, "stock_cover": cover}, calendar={"days": 7},
        effect={"lift": 0.4}, design=[{"kind": "interference_test"}],
        study={"reps": 60, "seed": 17})
    study = run_study(scenario, workers=2)
    test = study.interference_test("interference-test-pools")
    if interference:
        assert test.rejection_rate > 0.5
        assert test.mean_delta > 4 * test.mean_delta_se
    else:
        assert test.rejection_rate <= 0.05 + 4 * np.sqrt(0.05 * 0.95 / 60)
        assert abs(test.mean_delta) < 4 * test.mean_delta_se
    assert study.recommendation.label != "interference-test-pools"


def test_staggered_rollout_over_pools_avoids_stock_out_spillover():
    # A rollout that switches whole pools on keeps each shelf in one arm at a time, so like
    # pool-level randomization it is unbiased under stock-out spillover (Johari, Li,
    # Liskovich & Weintraub 2022 for the supply side; two-way fixed effects as in Xiong,
    # Athey, Bayati & Imbens 2024), while the user-level design is biased upward.
    scenario = make_scenario(
        users={"count": 3000, "orders_per_week": 3.0, "history_days": 0},
        pools={"count": 40, "stock_cover": 1.0}, calendar={"days": 8},
        effect={"lift": 0.4}, design=[{"kind": "user"}, {"kind": "rollout", "waves": 3}],
        study={"reps": 60, "seed": 23})
    study = run_study(scenario, workers=2)
    rollout = study.metrics["rollout-3-waves"]
    assert abs(rollout.bias) < 4 * rollout.bias_se
    assert study.metrics["user"].bias > 10 * study.metrics["user"].bias_se
