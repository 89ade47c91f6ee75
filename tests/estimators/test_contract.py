"""Contract shared by every estimator (scikit-learn's common-checks idea, STYLE.md §8).

Each estimator runs on a random small panel and schedule of the kind it analyses:
it returns an Estimate of floats with ci_low <= point <= ci_high, leaves its
inputs unchanged, is deterministic, and rejects mismatched sizes and bad
confidence levels with ValueError.
"""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from scipy import sparse

import spillgauge.estimators as estimators
from spillgauge.estimators import Estimate
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

_PANEL_FIELDS = ("fulfilled", "demanded", "pool_of_user", "history", "pool_fulfilled",
                 "pool_demanded", "pool_lost", "pool_stock")
_SCHEDULE_FIELDS = ("unit_of_user", "is_treated", "period_start_ticks")
# Helpers, and the test of interference (it returns a test result, not an Estimate; see
# test_interference.py).
_HELPERS = {"Estimate", "exposure_probabilities", "switchback_optimal_points",
            "switchback_exposure_probabilities", "interference_test", "InterferenceTest",
            "two_way_fixed_effects_period_weights", "redraw_assignment", "randomization_p_value"}


def _user_world(rng: np.random.Generator, n_users: int = 40):
    is_treated = np.zeros(n_users, dtype=bool)
    is_treated[rng.permutation(n_users)[: n_users // 2]] = True
    history = rng.poisson(5.0, n_users).astype(float)
    fulfilled = rng.poisson(2.0 + 0.5 * history[:, None] / 5 + is_treated[:, None], (n_users, 3))
    panel = OutcomePanel.from_arrays(fulfilled=fulfilled, history=history)
    schedule = AssignmentSchedule(unit_of_user=np.arange(n_users), is_treated=is_treated[:, None],
                                  period_start_ticks=[0], n_ticks=3, treated_probability=0.5,
                                  randomization="complete")
    return panel, schedule


def _stratified_user_world(rng: np.random.Generator, n_users: int = 40):
    from spillgauge.designs.user_level import draw_user_schedule

    strata = np.arange(n_users) % 4
    schedule = draw_user_schedule(n_users, 3, share=0.5, strata=strata, rng=rng)
    history = rng.poisson(5.0, n_users).astype(float)
    fulfilled = rng.poisson(2.0 + strata[:, None] + schedule.user_is_treated()[:, None],
                            (n_users, 3))
    return OutcomePanel.from_arrays(fulfilled=fulfilled, history=history), schedule


def _cluster_world(rng: np.random.Generator, n_users: int = 40, *, with_exposure: bool = False,
                   randomization: str = "complete"):
    n_clusters = 8
    cluster = np.sort(rng.integers(0, n_clusters, n_users))
    cluster[:n_clusters] = np.arange(n_clusters)  # every cluster has a user
    cluster = np.sort(cluster)
    is_treated = np.isin(np.arange(n_clusters), rng.permutation(n_clusters)[:4])
    fulfilled = rng.poisson(3.0 + is_treated[cluster][:, None], (n_users, 2))
    units = None
    if with_exposure:
        # own cluster plus, for a few users, the next cluster (neighbourhoods across clusters)
        rows = np.concatenate((np.arange(n_users), np.arange(0, n_users, 5)))
        cols = np.concatenate((cluster, (cluster[::5] + 1) % n_clusters))
        units = sparse.csr_array((np.ones(rows.size), (rows, cols)), shape=(n_users, n_clusters))
    schedule = AssignmentSchedule(unit_of_user=cluster, is_treated=is_treated[:, None],
                                  period_start_ticks=[0], n_ticks=2, treated_probability=0.5,
                                  unit_kind="cluster", randomization=randomization,
                                  exposure_units=units)
    return OutcomePanel.from_arrays(fulfilled=fulfilled), schedule


def _exposure_world(rng: np.random.Generator, n_users: int = 40):
    return _cluster_world(rng, n_users, with_exposure=True, randomization="bernoulli")


def _switchback_world(rng: np.random.Generator, n_users: int = 6):
    n_periods, period_ticks = 8, 4
    arms = np.zeros(n_periods, dtype=bool)
    arms[rng.permutation(n_periods)[:4]] = True
    pools = np.arange(n_users) % 2
    per_tick = rng.poisson(1.0 + np.repeat(arms, period_ticks)[None, :],
                           (n_users, n_periods * period_ticks))
    panel = OutcomePanel.from_arrays(fulfilled=per_tick, pool_of_user=pools)
    schedule = AssignmentSchedule(unit_of_user=np.zeros(n_users, int), is_treated=arms[None, :],
                                  period_start_ticks=np.arange(n_periods) * period_ticks,
                                  n_ticks=n_periods * period_ticks, treated_probability=0.5,
                                  unit_kind="market", randomization="complete")
    return panel, schedule


def _rollout_world(rng: np.random.Generator, n_users: int = 24):
    from spillgauge.designs import draw_rollout_schedule

    pools = np.arange(n_users) % 6
    schedule = draw_rollout_schedule(pools, 12, waves=2, rng=rng)
    per_tick = rng.poisson(1.0 + schedule.unit_tick_treated()[pools], (n_users, 12))
    return OutcomePanel.from_arrays(fulfilled=per_tick, pool_of_user=pools), schedule


def _launch_world(rng: np.random.Generator, n_users: int = 48):
    from spillgauge.designs.regional_launch import draw_regional_launch_schedule

    pools = np.arange(n_users) % 8
    schedule = draw_regional_launch_schedule(pools, np.arange(8.0), 48, pools=3,
                                             choose="largest", launch_tick=24, rng=rng)
    per_tick = rng.poisson(0.5 + 0.5 * schedule.unit_tick_treated()[pools], (n_users, 48))
    return OutcomePanel.from_arrays(fulfilled=per_tick, pool_of_user=pools, tick_hours=24), \
        schedule


CASES = {
    "difference_in_means": (estimators.difference_in_means, _user_world),
    "regression_adjusted_difference": (estimators.regression_adjusted_difference, _user_world),
    "stratified_difference_in_means": (estimators.stratified_difference_in_means,
                                       _stratified_user_world),
    "stratified_regression_adjusted_difference": (
        estimators.stratified_regression_adjusted_difference, _stratified_user_world),
    "hajek_cluster": (estimators.hajek_cluster, _cluster_world),
    "horvitz_thompson_cluster": (estimators.horvitz_thompson_cluster, _cluster_world),
    "horvitz_thompson_exposure": (estimators.horvitz_thompson_exposure, _exposure_world),
    "hajek_exposure": (estimators.hajek_exposure, _exposure_world),
    "switchback_difference": (estimators.switchback_difference, _switchback_world),
    "difference_in_differences": (estimators.difference_in_differences, _rollout_world),
    "staggered_difference_in_differences": (estimators.staggered_difference_in_differences,
                                            _rollout_world),
    "propensity_score_matching": (estimators.propensity_score_matching, _user_world),
    "inverse_probability_weighting": (estimators.inverse_probability_weighting, _user_world),
    "augmented_inverse_probability_weighting": (
        estimators.augmented_inverse_probability_weighting, _user_world),
    "pre_post_difference": (estimators.pre_post_difference, _launch_world),
    "launch_difference_in_differences": (estimators.launch_difference_in_differences,
                                         _launch_world),
    "synthetic_control": (estimators.synthetic_control, _launch_world),
    "synthetic_difference_in_differences": (estimators.synthetic_difference_in_differences,
                                            _launch_world),
}


def test_every_exported_estimator_is_covered():
    assert set(estimators.__all__) - _HELPERS == set(CASES)
    assert all(hasattr(estimators, name) for name in estimators.__all__)


def _snapshot(panel: OutcomePanel, schedule: AssignmentSchedule) -> dict:
    state = {name: np.array(getattr(panel, name), copy=True) for name in _PANEL_FIELDS}
    state.update({name: np.array(getattr(schedule, name), copy=True) for name in _SCHEDULE_FIELDS})
    units = schedule.exposure_units
    state["exposure_units"] = None if units is None else units.toarray()
    state["scalars"] = (panel.tick_hours, schedule.n_ticks, schedule.treated_probability,
                        schedule.unit_kind, schedule.randomization)
    return state


def _assert_same_state(before: dict, after: dict) -> None:
    for name, value in before.items():
        if isinstance(value, np.ndarray):
            np.testing.assert_array_equal(after[name], value, err_msg=name)
        else:
            assert after[name] == value, name


@pytest.mark.parametrize("name", sorted(CASES))
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_estimator_contract(name, seed):
    estimator, build = CASES[name]
    panel, schedule = build(np.random.default_rng(seed))
    before = _snapshot(panel, schedule)
    est = estimator(panel, schedule, confidence=0.9)
    assert isinstance(est, Estimate) and est.method == name
    for field in ("point", "standard_error", "ci_low", "ci_high"):
        value = getattr(est, field)
        assert type(value) is float and math.isfinite(value), field
    assert type(est.n_units) is int and est.n_units > 0
    assert est.ci_low <= est.point <= est.ci_high
    assert est.standard_error >= 0
    _assert_same_state(before, _snapshot(panel, schedule))
    assert estimator(panel, schedule, confidence=0.9) == est  # same input, same output
    wider = estimator(copy.copy(panel), schedule, confidence=0.99)
    assert wider.ci_high - wider.ci_low >= est.ci_high - est.ci_low


@pytest.mark.parametrize("name", sorted(CASES))
def test_size_mismatch_raises(name):
    estimator, build = CASES[name]
    panel, schedule = build(np.random.default_rng(5))
    bigger_panel, _ = build(np.random.default_rng(5), panel.n_users + 2)
    with pytest.raises(ValueError, match="users"):
        estimator(bigger_panel, schedule)


@pytest.mark.parametrize("name", sorted(CASES))
@pytest.mark.parametrize("confidence", [0.0, 1.0, 1.5, -0.1, float("nan"), True, "0.95"])
def test_bad_confidence_raises(name, confidence):
    estimator, build = CASES[name]
    panel, schedule = build(np.random.default_rng(6))
    with pytest.raises(ValueError, match="confidence"):
        estimator(panel, schedule, confidence=confidence)
