"""A cluster design that can never put two clusters in each arm is refused before it runs."""

from __future__ import annotations

import pytest

from spillgauge.designs.kind import clusters_per_arm
from spillgauge.errors import ScenarioError
from tests.conftest import make_scenario


def _scenario(pools: int, **design):
    return make_scenario(users={"count": 60}, pools={"count": pools}, calendar={"days": 4},
                         design=[{"kind": "cluster", **design}])


@pytest.mark.parametrize(("pools", "design"), [
    (3, {}),                                   # 3 pools, share 0.5: 2 treated, 1 control
    (5, {"share": 0.3}),                       # round(1.5) = 2 treated, 3 control: ok below
    (3, {"randomization": "bernoulli"}),       # Bernoulli can leave an arm with one pool
])
def test_too_few_pools_per_arm_is_refused_naming_the_field(pools, design):
    # A cluster-robust variance needs at least two clusters per arm (common practice, no
    # source beyond the variance being undefined with one: Cameron & Miller 2015 discuss
    # how few clusters break it).
    if pools == 5:
        # round(0.3 * 5) = 2 treated (Python rounds 1.5 to 2), 3 control: accepted
        assert clusters_per_arm(5, 0.3, "complete") == 2
        _scenario(pools, **design)
        return
    with pytest.raises(ScenarioError, match=r"pools\.count.*per arm.*got 3"):
        _scenario(pools, **design)


def test_four_pools_are_enough():
    assert clusters_per_arm(4, 0.5, "complete") == 2
    _scenario(4)
    _scenario(4, randomization="bernoulli")
