"""``inference = "randomization"``: Fisher's p-value from re-draws of a design's own assignment.

References: Fisher (1935), *The Design of Experiments*, section 21 (the exact test
of the sharp null by re-randomization); Imbens & Rubin (2015), *Causal Inference*,
ch. 5 (Fisher's exact p-values: under the sharp null every outcome is fixed, so
the p-value ``(1 + #{|T_r| >= |T_obs|}) / (1 + R)`` over ``R`` re-draws of the
assignment is valid at every level, exactly at levels that are multiples of
``1 / (1 + R)``); Bojinov, Simchi-Levi & Zhao (2023) for switchbacks.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
import warnings

import numpy as np
import pytest
from scipy import stats

from spillgauge.designs import make_design_spec
from spillgauge.designs.registry import KINDS, kind_of
from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.estimators import switchback_difference
from spillgauge.market.build import build_market
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule
from spillgauge.study.replication import DesignRun, run_replication
from spillgauge.study.run import run_study
from spillgauge.worlds.engine import simulate_worlds
from tests.conftest import make_scenario

RANDOMIZED_KINDS = sorted(name for name, kind in KINDS.items()
                          if any(key.name == "inference" for key in kind.keys))
PERMUTATIONS = 19  # p-values are multiples of 1/20, so a 5% test is exact (Imbens & Rubin 5.5)


def _null_market():
    # lift 0, no graph, stock far above demand: no design can change any outcome (sharp null)
    scenario = make_scenario(
        users={"count": 160, "orders_per_week": 5.0}, pools={"count": 8, "stock_cover": 50.0},
        calendar={"days": 6}, graph={"model": "none"}, effect={"lift": 0.0},
        design=[{"kind": "user"}])
    return build_market(scenario, 4)


@pytest.fixture(scope="module")
def null_market():
    return _null_market()


def test_every_randomized_kind_offers_it_and_launches_do_not():
    # Launches and the test of interference are not re-drawn (their assignment is not a
    # single randomization of units); every other randomized kind declares the key.
    assert set(RANDOMIZED_KINDS) == {"user", "cluster", "switchback", "rollout",
                                     "switchback_minimax"}
    for name, kind in KINDS.items():
        if not kind.is_randomized:
            assert name not in RANDOMIZED_KINDS


def _null_rejections(market, kind_name: str, n_draws: int, seed: int,
                     **more: object) -> tuple[int, int]:
    """Return (randomization p-values <= 0.05, finite p-values) over fresh assignments."""
    spec = make_design_spec(kind_name, {"inference": "randomization",
                                        "permutations": PERMUTATIONS, **more})
    kind = kind_of(spec)
    kind.prepare(market, spec)
    rng = np.random.default_rng(seed)
    first = kind.draw(market, spec, rng=rng)
    control = AssignmentSchedule.fixed(n_users=market.n_users, n_ticks=market.n_ticks,
                                       is_treated=False)
    null, own = simulate_worlds(market, [control, first], rng=np.random.default_rng(seed + 1))
    # the sharp null holds in this market: the design's world is the all-control world
    assert np.array_equal(null.pool_fulfilled, own.pool_fulfilled)
    rejections = total = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(n_draws):
            schedule = kind.draw(market, spec, rng=rng)
            p = kind.analyse(spec, null, schedule, confidence=0.95,
                             tick_hours=market.tick_hours, rng=rng).randomization_p_value
            if math.isfinite(p):
                total += 1
                rejections += p <= 0.05
    return rejections, total


def _assert_level_5_percent(rejections: int, total: int, level: float = 0.05) -> None:
    # Rejection rate = 5% within binomial error (scipy.stats.binomtest, two-sided, level
    # 0.001). Ties between re-draws can only lower it (Imbens & Rubin 2015, ch. 5).
    assert total > 0
    result = stats.binomtest(rejections, total, level)
    assert result.pvalue > 0.001, f"rejected {rejections}/{total} = {rejections / total:.3f}"


@pytest.mark.parametrize("kind_name", ["user", "switchback"])
def test_randomization_test_rejects_5_percent_under_the_null_fast(null_market, kind_name):
    _assert_level_5_percent(*_null_rejections(null_market, kind_name, 120, seed=31))


@pytest.mark.slow
@pytest.mark.parametrize("kind_name", RANDOMIZED_KINDS)
def test_randomization_test_rejects_5_percent_under_the_null(null_market, kind_name):
    rejections, total = _null_rejections(null_market, kind_name, 1500, seed=77)
    print(f"{kind_name}: {rejections}/{total} = {rejections / total:.4f}")
    _assert_level_5_percent(rejections, total)


# The studentized statistic (the estimate over its own SE, Chung & Romano 2013; Wu & Ding
# 2021) is as exact under the sharp null: the same re-draws, another function of them. An
# assignment without a standard error is the least extreme, so its own p-value would be 1:
# the level holds over all draws, which is the denominator here (with 12 h burn-in of 6
# daily blocks a fifth of the draws leave an arm's burn-in hours on one block).
# Cluster: 4 of 8 pools, C(8, 4) = 70 assignments, T(S) = -T(complement), so |T| takes 35
# equally likely values and with R = 19 re-draws P(p <= 1/20) = P(no re-draw at least as
# extreme) = (1/35) sum_k (1 - k/35)^19 = 3.70% (derived here; ties lower the level).
STUDENTIZED = [("user", {}, 0.05),
               ("cluster", {}, sum((1 - k / 35) ** 19 for k in range(1, 36)) / 35),
               ("switchback", {"burn_in_hours": 12}, 0.05)]


def test_studentized_randomization_test_rejects_5_percent_under_the_null_fast(null_market):
    rejections, _ = _null_rejections(null_market, "switchback", 120, seed=32,
                                     burn_in_hours=12, randomization_statistic="studentized")
    _assert_level_5_percent(rejections, 120)


@pytest.mark.slow
@pytest.mark.parametrize(("kind_name", "more", "level"), STUDENTIZED)
def test_studentized_randomization_test_rejects_5_percent_under_the_null(null_market,
                                                                          kind_name, more,
                                                                          level):
    rejections, total = _null_rejections(null_market, kind_name, 1500, seed=79,
                                         randomization_statistic="studentized", **more)
    print(f"{kind_name} {more} studentized: {rejections}/1500 = {rejections / 1500:.4f} "
          f"(expected {level:.4f}; {total} draws with a standard error)")
    _assert_level_5_percent(rejections, 1500, level)


def _fisher_reference(statistics: np.ndarray, observed: float) -> float:
    """Exact p: share of all equally likely assignments at least as extreme (NaN: not)."""
    finite = np.isfinite(statistics)
    extreme = finite & (np.abs(np.where(finite, statistics, 0.0))
                        >= abs(observed) * (1 - 1e-12))  # same rounding allowance
    return float(extreme.mean())


def _assert_matches_exact(p_value: float, exact: float, permutations: int) -> None:
    # The Monte Carlo p-value is (1 + X) / (1 + R) with X ~ Binomial(R, exact), R re-draws
    # uniform over the same assignments; binomtest at level 0.001.
    extreme = round(p_value * (1 + permutations)) - 1
    assert stats.binomtest(extreme, permutations, exact).pvalue > 0.001, (p_value, exact)


def test_user_design_agrees_with_exact_enumeration():
    # Complete randomization of 4 of 8 users: all C(8, 4) = 70 assignments are equally
    # likely; the statistic is the difference in means, computed here by hand.
    rng = np.random.default_rng(3)
    orders = rng.poisson(40, size=8)
    orders[:4] += 9  # a shift in the observed treated users, so the p-value is moderate
    panel = OutcomePanel.from_arrays(fulfilled=orders)
    observed_treated = np.arange(8) < 4
    schedule = AssignmentSchedule(
        unit_of_user=np.arange(8), is_treated=observed_treated[:, None],
        period_start_ticks=np.zeros(1, dtype=np.int64), n_ticks=1, treated_probability=0.5,
        unit_kind="user", randomization="complete")
    spec = make_design_spec("user", {"inference": "randomization", "permutations": 4000})
    estimate = kind_of(spec).analyse(spec, panel, schedule, confidence=0.95, tick_hours=24,
                                     rng=np.random.default_rng(9))
    y = orders.astype(float)
    statistics = []
    for treated in itertools.combinations(range(8), 4):
        arm = np.isin(np.arange(8), treated)
        statistics.append(y[arm].mean() - y[~arm].mean())
    observed = y[observed_treated].mean() - y[~observed_treated].mean()
    assert estimate.point == pytest.approx(observed)
    exact = _fisher_reference(np.array(statistics), observed)
    assert 0.02 < exact < 0.5  # the case is informative
    _assert_matches_exact(estimate.randomization_p_value, exact, 4000)


def _market_switchback(orders, arms, block: int):
    """A one-market panel of hourly orders and its switchback of Bernoulli(1/2) blocks."""
    arms = np.array(arms, dtype=bool)
    panel = OutcomePanel.from_arrays(fulfilled=orders[None, :])
    schedule = AssignmentSchedule(
        unit_of_user=np.zeros(1, dtype=np.int64), is_treated=arms[None, :],
        period_start_ticks=np.arange(arms.size) * block, n_ticks=arms.size * block,
        treated_probability=0.5, unit_kind="market", randomization="bernoulli")
    return panel, schedule


def test_switchback_agrees_with_exact_enumeration():
    # A market switchback of 6 daily blocks, each Bernoulli(1/2): all 2^6 = 64 arm
    # sequences are equally likely (Bojinov, Simchi-Levi & Zhao 2023); sequences with one
    # arm only give no estimate and count as not extreme.
    rng = np.random.default_rng(12)
    n_blocks, block = 6, 24
    orders = rng.poisson(20.0, size=n_blocks * block)
    orders[:block] += 6
    orders[2 * block:3 * block] += 6
    panel, schedule = _market_switchback(orders, [1, 0, 1, 0, 0, 1], block)
    spec = make_design_spec("switchback", {"inference": "randomization",
                                           "permutations": 1500})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DegenerateEstimateWarning)
        estimate = kind_of(spec).analyse(spec, panel, schedule, confidence=0.95,
                                         tick_hours=1, rng=np.random.default_rng(4))
        statistics = np.array([
            switchback_difference(panel, dataclasses.replace(
                schedule, is_treated=np.array(sequence, dtype=bool)[None, :])).point
            for sequence in itertools.product((0, 1), repeat=n_blocks)])
    exact = _fisher_reference(statistics, estimate.point)
    assert 0.02 < exact < 0.6
    _assert_matches_exact(estimate.randomization_p_value, exact, 1500)


def test_studentized_switchback_agrees_with_exact_enumeration():
    # The same 64 equally likely sequences, the statistic the estimate over its own standard
    # error (12 h burn-in of 24 h blocks); sequences without a standard error count as not
    # extreme, as they do for the re-draws.
    rng = np.random.default_rng(13)
    n_blocks, block = 6, 24
    orders = rng.poisson(20.0, size=n_blocks * block)
    orders[block + 12:2 * block] += 5
    orders[3 * block + 12:4 * block] += 5
    panel, schedule = _market_switchback(orders, [0, 1, 1, 1, 0, 0], block)
    spec = make_design_spec("switchback", {"inference": "randomization", "burn_in_hours": 12,
                                           "permutations": 1500,
                                           "randomization_statistic": "studentized"})

    def studentized(estimate) -> float:
        se = estimate.standard_error
        return estimate.point / se if np.isfinite(se) and se > 0 else math.nan

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DegenerateEstimateWarning)
        estimate = kind_of(spec).analyse(spec, panel, schedule, confidence=0.95,
                                         tick_hours=1, rng=np.random.default_rng(4))
        statistics = np.array([studentized(switchback_difference(
            panel, dataclasses.replace(schedule, is_treated=np.array(sequence, bool)[None, :]),
            burn_in_ticks=12)) for sequence in itertools.product((0, 1), repeat=n_blocks)])
    exact = _fisher_reference(statistics, studentized(estimate))
    assert 0.02 < exact < 0.6
    _assert_matches_exact(estimate.randomization_p_value, exact, 1500)


def _study_scenario(inference: str):
    return make_scenario(
        users={"count": 120, "orders_per_week": 5.0}, pools={"count": 8, "stock_cover": 50.0},
        calendar={"days": 5}, graph={"model": "none"}, effect={"lift": 0.0},
        study={"reps": 60, "seed": 5},
        design=[{"kind": "user", "inference": inference, "permutations": PERMUTATIONS},
                {"kind": "cluster"}])


def test_a_study_counts_power_from_the_randomization_p_values():
    result = run_study(_study_scenario("randomization"), workers=1)
    user = result.designs["user"]
    p_values = np.array([r.runs["user"].estimate.randomization_p_value
                         for r in result.replications])
    assert np.isfinite(p_values).all()
    # power is the share of replications whose randomization p-value is at most alpha
    assert user.metrics.power == pytest.approx(np.mean(p_values <= 0.05))
    _assert_level_5_percent(int(np.sum(p_values <= 0.05)), p_values.size)
    # the cluster design did not ask: no randomization p-value
    assert all(math.isnan(r.runs["cluster-pools"].estimate.randomization_p_value)
               for r in result.replications)


def test_asking_for_it_changes_no_other_number():
    # Its own stream: the estimates, intervals and the other design are bit for bit the
    # same as with analytic inference (the pins cover scenarios without the key).
    analytic = run_replication(_study_scenario("analytic"), 5, 3)
    fisher = run_replication(_study_scenario("randomization"), 5, 3)
    for label in ("user", "cluster-pools"):
        a, b = analytic.runs[label].estimate, fisher.runs[label].estimate
        assert (a.point, a.standard_error, a.ci_low, a.ci_high, a.p_value) == (
            b.point, b.standard_error, b.ci_low, b.ci_high, b.p_value)
    assert math.isnan(analytic.runs["user"].estimate.randomization_p_value)
    saved = fisher.runs["user"]
    again = DesignRun.from_record(saved.to_record())  # a resumed study keeps it
    assert again.estimate.randomization_p_value == saved.estimate.randomization_p_value
    assert "randomization_p_value" not in analytic.runs["user"].to_record()


@pytest.mark.slow
@pytest.mark.parametrize("strata", ["pools", "pre_period"])
def test_stratified_randomization_test_rejects_5_percent_under_the_null(null_market, strata):
    # Re-draws within strata (blocked randomization, Imbens & Rubin 2015, ch. 9) keep the
    # Fisher test exact under the sharp null.
    spec = make_design_spec("user", {"strata": strata, "inference": "randomization",
                                     "permutations": PERMUTATIONS})
    kind = kind_of(spec)
    rng = np.random.default_rng(78)
    control = AssignmentSchedule.fixed(n_users=null_market.n_users,
                                       n_ticks=null_market.n_ticks, is_treated=False)
    (null,) = simulate_worlds(null_market, [control], rng=np.random.default_rng(79))
    rejections = total = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(1500):
            p = kind.analyse(spec, null, kind.draw(null_market, spec, rng=rng),
                             confidence=0.95, tick_hours=null_market.tick_hours,
                             rng=rng).randomization_p_value
            total += bool(math.isfinite(p))
            rejections += bool(p <= 0.05)
    print(f"user strata={strata}: {rejections}/{total} = {rejections / total:.4f}")
    _assert_level_5_percent(rejections, total)
