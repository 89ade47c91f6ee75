"""Property-based: small random markets run end to end, or stop with a named ScenarioError."""

from __future__ import annotations

import warnings

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from spillgauge.errors import ScenarioError
from spillgauge.report.text import study_text
from spillgauge.scenario.reading import parse_scenario
from spillgauge.study.run import run_study

DESIGNS = [
    {"kind": "user"}, {"kind": "user", "adjust": True},
    {"kind": "user", "randomization": "bernoulli"},
    {"kind": "cluster"}, {"kind": "cluster", "estimator": "horvitz_thompson"},
    {"kind": "cluster", "clusters": "graph"},
    {"kind": "cluster", "clusters": "pools+graph", "exposure": "neighbourhood"},
    {"kind": "switchback", "block_hours": 12},
    {"kind": "switchback", "block_hours": 12, "burn_in_hours": 4, "per": "pool"},
    {"kind": "interference_test"},
]


@st.composite
def small_markets(draw):
    model = draw(st.sampled_from(["none", "small_world", "pool_blocks", "communities"]))
    degree = draw(st.sampled_from([0, 2, 4]))
    pools = {"count": draw(st.integers(1, 6)), "stock_cover": draw(st.floats(0.05, 5)),
             "lead_time_hours": draw(st.sampled_from([0, 6, 12])), "restock_every_hours": 24}
    if draw(st.booleans()):
        pools.update(on_stockout="substitute", substitute_share=0.5)
    return {
        "name": "fuzz", "users": {"count": draw(st.integers(1, 60))}, "pools": pools,
        "calendar": {"days": draw(st.integers(1, 3)), "tick_hours": draw(st.sampled_from(
            [1, 2, 6, 24])), "daily_shock_sd": draw(st.floats(0, 0.5))},
        "graph": {"model": model, "mean_degree": max(degree, 2) if model == "small_world"
                  else degree},
        "effect": {"lift": draw(st.floats(-0.5, 2)), "peer_lift": draw(st.floats(-0.5, 2)),
                   "carryover_half_life_hours": draw(st.floats(0, 10))},
        "study": {"reps": draw(st.integers(1, 3))},
        "design": draw(st.lists(st.sampled_from(DESIGNS), min_size=1, max_size=4,
                                unique_by=str)),
    }


@settings(max_examples=40, deadline=None, suppress_health_check=list(HealthCheck))
@given(small_markets())
def test_small_markets_run_end_to_end(data):
    # The whole study must never fail with anything but a named ScenarioError.
    try:
        scenario = parse_scenario(data)
    except ScenarioError:
        return
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            study = run_study(scenario, workers=1)
        except ScenarioError as exc:
            assert exc.field
            return
    assert study.reps == data["study"]["reps"]
    assert set(study.metrics) == {spec.label for spec in scenario.designs}
    assert study_text(study)
