"""Each bundled scenario teaches its lesson: the study recommends the design it was built for."""

from __future__ import annotations

import pytest

from spillgauge.bundled import find_scenario
from spillgauge.scenario.reading import load_scenario
from spillgauge.study.run import run_study

# Expected recommendations, one per lesson (issue text; the markets are our own invention):
# calm market -> user level (no interference: the finest unit wins; REFERENCES check 28);
# supply-constrained pools -> pool clusters (Johari, Li, Liskovich & Weintraub 2022);
# peers inside communities -> graph clusters (Ugander, Karrer, Backstrom & Kleinberg 2013);
# few shared pools with daily restock and carryover -> a daily switchback per pool with a
# burn-in (Bojinov, Simchi-Levi & Zhao 2023).
EXPECTED = {
    "calm_corner": ("user", None),
    "tight_pantry": ("cluster", "cluster-pools"),
    "chatty_club": ("cluster", "cluster-graph"),
    "four_towns": ("switchback", "switchback-24h-burn8h-per-pool"),
}


@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_bundled_scenario_recommendation(name):
    scenario = load_scenario(find_scenario(name))
    study = run_study(scenario, reps=80, workers=2)
    kind, label = EXPECTED[name]
    chosen = study.recommendation.label
    assert study.recommendation.is_trustworthy, study.recommendation.reason
    assert scenario.design(chosen).kind == kind, study.recommendation.reason
    if label is not None:
        assert chosen == label, study.recommendation.reason
