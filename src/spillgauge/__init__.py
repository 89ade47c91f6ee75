"""spillgauge: choose an experiment's randomization unit in a simulated copy of your market.

The market (shared stock pools, a social graph, a calendar with carryover) is
simulated under every candidate design and under the two counterfactual worlds
(all treated, none treated) on common random numbers, so each design's drift
from the true global treatment effect can be measured.

Public names are imported on first use, so ``import spillgauge`` (and the
command line) start fast.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

_EXPORTS = {
    "AssignmentSchedule": "spillgauge.schedule",
    "DegenerateEstimateWarning": "spillgauge.errors",
    "Market": "spillgauge.market.build",
    "OutcomePanel": "spillgauge.panel",
    "ResultsError": "spillgauge.errors",
    "Scenario": "spillgauge.scenario",
    "ScenarioError": "spillgauge.errors",
    "SpillgaugeError": "spillgauge.errors",
    "StudyResult": "spillgauge.study.result",
    "build_market": "spillgauge.market.build",
    "load_scenario": "spillgauge.scenario.reading",
    "parse_scenario": "spillgauge.scenario.reading",
    "run_study": "spillgauge.study.run",
    "run_truth": "spillgauge.study.run",
    "run_sweep": "spillgauge.sweep.sweep",
    "plan_study": "spillgauge.plan.plan",
    "PlanResult": "spillgauge.plan.plan",
    "parse_vary": "spillgauge.sweep.sweep",
    "SweepResult": "spillgauge.sweep.sweep",
    "simulate_worlds": "spillgauge.worlds.engine",
    "assign_design": "spillgauge.experiment.assignment",
    "simulate_experiment": "spillgauge.experiment.simulate",
    "analyze_experiment": "spillgauge.experiment.analyze",
    "Assignment": "spillgauge.experiment.assignment",
    "SimulatedExperiment": "spillgauge.experiment.simulate",
    "ExperimentAnalysis": "spillgauge.experiment.analyze",
}

__all__ = ["__version__", *sorted(_EXPORTS)]


def __getattr__(name: str):
    if name in _EXPORTS:
        value = getattr(importlib.import_module(_EXPORTS[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'spillgauge' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
