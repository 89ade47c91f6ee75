"""The launch kinds' draws and checks: who opts in, which pools launch, refused settings."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special

from spillgauge.designs.opt_in import opt_in_probabilities
from spillgauge.designs.regional_launch import draw_regional_launch_schedule
from spillgauge.errors import ScenarioError
from tests.conftest import make_scenario


def test_opt_in_probabilities_have_the_take_up_and_the_selection_slope():
    trait = np.random.default_rng(0).gamma(2.0, 1.0, 5000)
    p = opt_in_probabilities(trait, take_up=0.25, selection=0.8)
    # mean probability = take_up (the intercept is solved for it), and the log-odds rise by
    # `selection` per SD of the trait (the definition of selection).
    assert p.mean() == pytest.approx(0.25, abs=1e-12)
    slope = np.polyfit((trait - trait.mean()) / trait.std(), special.logit(p), 1)[0]
    assert slope == pytest.approx(0.8, rel=1e-9)


def test_largest_and_smallest_launch_the_pools_with_most_and_least_demand():
    demand = np.array([3.0, 9.0, 1.0, 7.0, 5.0, 2.0])
    pools = np.repeat(np.arange(6), 2)
    rng = np.random.default_rng(0)
    largest = draw_regional_launch_schedule(pools, demand, 10, pools=2, choose="largest",
                                            launch_tick=4, rng=rng)
    smallest = draw_regional_launch_schedule(pools, demand, 10, pools=2, choose="smallest",
                                             launch_tick=4, rng=rng)
    assert np.flatnonzero(largest.is_treated[:, 1]).tolist() == [1, 3]
    assert np.flatnonzero(smallest.is_treated[:, 1]).tolist() == [2, 5]
    assert not largest.is_treated[:, 0].any()


def test_selection_on_history_without_a_pre_period_is_refused_naming_both_keys():
    with pytest.raises(ScenarioError, match=r"design\[0\]\.selection_on.*users\.history_days"):
        make_scenario(users={"history_days": 0}, design=[{"kind": "opt_in"}])
    make_scenario(users={"history_days": 0}, design=[{"kind": "opt_in", "selection_on": "rate"}])


@pytest.mark.parametrize(("table", "field"), [
    ({"kind": "regional_launch", "pools": 18}, r"pools\.count"),
    ({"kind": "regional_launch", "launch_day": 28}, r"design\[0\]\.launch_day"),
    ({"kind": "regional_launch", "pools": 1, "estimator": "did"}, r"design\[0\]\.pools"),
    ({"kind": "regional_launch", "pools": 10, "estimator": "synthetic_did"},
     r"pools\.count must be >= 2 x design\[0\]\.pools \+ 2 = 22"),
    ({"kind": "regional_launch", "pools": 10, "estimator": "synthetic_control"},
     r"pools\.count must be >= 2 x design\[0\]\.pools \+ 2 = 22"),
    ({"kind": "regional_launch", "estimator": "did", "variance": "jackknife"},
     r"design\[0\]\.variance must be 'placebo' unless estimator = 'synthetic_did'"),
    ({"kind": "regional_launch", "pools": 1, "estimator": "synthetic_did",
      "variance": "jackknife"}, r"design\[0\]\.pools must be >= 2 for variance"),
    ({"kind": "regional_launch", "variance": "bootstrap"}, r"design\[0\]\.variance"),
    ({"kind": "opt_in", "take_up": 1.0}, r"design\[0\]\.take_up"),
    ({"kind": "opt_in", "estimator": "lasso"}, r"design\[0\]\.estimator"),
])
def test_bad_launch_settings_are_named(table, field):
    with pytest.raises(ScenarioError, match=field):
        make_scenario(design=[table])
