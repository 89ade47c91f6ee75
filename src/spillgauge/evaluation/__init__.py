"""Evaluation: the truth (GTE), the study over replications, metrics and the recommendation.

The only layer that composes the market, the designs and the estimators.
Names are imported on first use.
"""

from __future__ import annotations

import importlib

_EXPORTS = {
    "Candidate": "spillgauge.evaluation.recommend",
    "DesignMetrics": "spillgauge.evaluation.metrics",
    "Recommendation": "spillgauge.evaluation.recommend",
    "ReplicationTruth": "spillgauge.evaluation.truth",
    "StudyResult": "spillgauge.evaluation.study",
    "TruthSummary": "spillgauge.evaluation.truth",
    "design_metrics": "spillgauge.evaluation.metrics",
    "recommend": "spillgauge.evaluation.recommend",
    "retrodesign": "spillgauge.evaluation.metrics",
    "run_study": "spillgauge.evaluation.study",
    "run_truth": "spillgauge.evaluation.study",
    "SweepAxis": "spillgauge.evaluation.sweep",
    "SweepResult": "spillgauge.evaluation.sweep",
    "parse_vary": "spillgauge.evaluation.sweep",
    "run_sweep": "spillgauge.evaluation.sweep",
    "with_value": "spillgauge.evaluation.sweep",
    "write_sweep": "spillgauge.evaluation.sweep",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    if name in _EXPORTS:
        value = getattr(importlib.import_module(_EXPORTS[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'spillgauge.evaluation' has no attribute {name!r}")
