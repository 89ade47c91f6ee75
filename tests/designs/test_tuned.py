"""Tuned design parameters: numeric keys given as lists expand into one design per combination."""

from __future__ import annotations

import math

import numpy as np
import pytest

from spillgauge.errors import ScenarioError
from spillgauge.statistics.trust import is_trusted
from spillgauge.study.run import run_study
from tests.conftest import make_scenario


def _scenario(*design, **sections):
    return make_scenario(users={"count": 200}, pools={"count": 4},
                         graph={"model": "small_world", "mean_degree": 4},
                         design=list(design), **sections)


def test_lists_expand_into_every_combination_with_readable_labels():
    s = _scenario({"kind": "switchback", "block_hours": [6, 12], "burn_in_hours": [0, 2]},
                  {"kind": "user", "share": [0.2, 0.5]}, {"kind": "user", "adjust": True},
                  {"kind": "cluster", "clusters": "graph", "resolution": [0.5, 1, 2]})
    assert [d.label for d in s.designs] == [
        "switchback-6h", "switchback-6h-burn2h", "switchback-12h", "switchback-12h-burn2h",
        "user-share0.2", "user-share0.5", "user-cuped",
        "cluster-graph-r0.5", "cluster-graph", "cluster-graph-r2"]
    assert [d.block_hours for d in s.designs[:4]] == [6, 6, 12, 12]
    assert {d.index for d in s.designs[:4]} == {0}  # errors name the table in the file
    named = _scenario({"kind": "switchback", "label": "sb", "block_hours": [6, 12]})
    assert [d.label for d in named.designs] == ["sb-block-hours6", "sb-block-hours12"]


def test_scenario_without_lists_keeps_its_designs():
    s = _scenario({"kind": "switchback", "block_hours": 12}, {"kind": "user"})
    assert [(d.label, d.block_hours if d.kind == "switchback" else None)
            for d in s.designs] == [("switchback-12h", 12), ("user", None)]


@pytest.mark.parametrize("design, field, message", [
    ({"kind": "cluster", "clusters": ["pools", "graph"]}, r"design\[0\]\.clusters",
     "only numeric keys"),
    ({"kind": "switchback", "block_hours": []}, r"design\[0\]\.block_hours", "non-empty"),
    ({"kind": "switchback", "block_hours": [6, 6]}, r"design\[0\]\.block_hours", "distinct"),
    ({"kind": "switchback", "block_hours": [6, "x"]}, r"design\[0\]\.block_hours", "an int"),
    ({"kind": "switchback", "block_hours": [6, 0]}, r"design\[0\]\.block_hours", ">= 1"),
    ({"kind": "switchback", "block_hours": [6, 12], "burn_in_hours": [0, 8]},
     r"design\[0\]\.burn_in_hours", "block_hours=6"),
    ({"kind": "user", "share": [i / 100 for i in range(1, 66)]}, r"design\[0\]", "at most 64"),
])
def test_bad_lists_are_refused_by_name(design, field, message):
    with pytest.raises(ScenarioError, match=field) as caught:
        _scenario(design)
    assert message in str(caught.value)


def _carryover_dose(block_ticks: int, half_life_ticks: float, n_ticks: int) -> float:
    # Mean dose of a control tick (docs/model.md: dose 2^(-(k - j)/h) k - j ticks after the
    # unit's last treated tick j, 0 before the first), for a market switchback with p = 1/2:
    # the last treated block lies g >= 1 blocks back with probability 2^-g, and none before
    # the horizon starts. Derived on paper from the dose formula, then averaged over every
    # block and position.
    n_blocks = n_ticks // block_ticks
    total = 0.0
    for b in range(n_blocks):
        for j in range(block_ticks):
            total += sum(0.5**g * 2 ** (-((g - 1) * block_ticks + j + 1) / half_life_ticks)
                         for g in range(1, b + 1))
    return total / (n_blocks * block_ticks)


def test_tuned_block_length_follows_the_carryover_attenuation_and_the_rmse_rule():
    # Ample stock, flat rhythm, no graph: the only bias of a market switchback is carryover
    # into control blocks, which attenuates the estimate by the mean control dose
    # (relative bias = -mean dose; carryover model of docs/model.md, the attenuation that
    # Bojinov, Simchi-Levi & Zhao 2023 and Hu & Wager 2022 study). Daily shocks make long
    # blocks noisy: short blocks are biased, long ones noisy.
    half_life = 6.0
    scenario = make_scenario(
        users={"count": 2000, "orders_per_week": 2.0, "history_days": 0},
        pools={"count": 4, "stock_cover": 1000.0}, calendar={"days": 28, "daily_shock_sd": 0.3},
        graph={"model": "none"}, effect={"lift": 0.3, "carryover_half_life_hours": half_life},
        design=[{"kind": "switchback", "block_hours": [6, 12, 24, 48]}],
        study={"reps": 60, "seed": 5})
    study = run_study(scenario)
    for spec in scenario.designs:
        m = study.metrics[spec.label]
        expected = -_carryover_dose(spec.block_hours, half_life, 28 * 24)
        assert abs(m.relative_bias - expected) <= 4 * m.relative_bias_se, spec.label
    # Brute force: RMSE of each variant from the saved replications, then the rule "lowest
    # RMSE among trusted variants; within 2 Monte Carlo SEs of it, the most units".
    rmse = {}
    for spec in scenario.designs:
        errors = np.array([r.runs[spec.label].estimate.point - r.truth.gte
                           for r in study.replications])
        rmse[spec.label] = math.sqrt(float(np.mean(errors**2)))
        assert rmse[spec.label] == pytest.approx(study.metrics[spec.label].rmse, rel=1e-12)
    trusted = [s.label for s in scenario.designs if is_trusted(study.metrics[s.label])]
    assert trusted, "the check needs a trusted variant"
    best = min(trusted, key=rmse.get)
    near = [label for label in trusted if rmse[label] - rmse[best] <= 2 * math.hypot(
        study.metrics[label].rmse_se, study.metrics[best].rmse_se)]
    blocks = {s.label: 28 * 24 // s.block_hours for s in scenario.designs}
    assert study.recommendation.label == max(near, key=lambda label: (blocks[label],
                                                                      -rmse[label]))
    # The short blocks' attenuation is what costs them trust here.
    assert not is_trusted(study.metrics["switchback-6h"])
