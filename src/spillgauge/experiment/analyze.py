"""Analyse a real experiment with the estimator and interval the simulation judged.

The design's kind analyses the panel through the registry
(:meth:`DesignKind.analyse`), exactly as a study's replication does, so the
estimate on a simulated experiment equals that replication's bit for bit, and
changes to an estimator's interval reach the analysis by themselves.
"""

from __future__ import annotations

import json
import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from spillgauge.designs.registry import kind_of
from spillgauge.errors import DegenerateEstimateWarning, ResultsError, ScenarioError
from spillgauge.estimators.estimate import Estimate, InterferenceDiagnostic, LaunchDiagnostic
from spillgauge.estimators.relative import relative_effect
from spillgauge.experiment.assignment import (
    ASSIGNMENT_REPLICATION,
    Assignment,
    market_fingerprint,
)
from spillgauge.experiment.folder import read_assignment
from spillgauge.experiment.orders import read_orders
from spillgauge.experiment.simulate import ORDERS, POOL_ORDERS, TRUTH
from spillgauge.files import json_safe
from spillgauge.formatting import OUTCOME_UNITS, format_number, format_percent, wrap_text
from spillgauge.panel import OutcomePanel
from spillgauge.scenario.reading import design_to_dict
from spillgauge.seeding import RANDOMIZATION_TEST, design_key, stream

__all__ = [
    "ExperimentAnalysis",
    "analyse_panel",
    "analysis_record",
    "analysis_text",
    "analyze_experiment",
    "randomization_test_rng",
    "study_context",
]


@dataclass(frozen=True, eq=False)
class ExperimentAnalysis:
    """The analysis of one experiment.

    Attributes
    ----------
    assignment : Assignment
    estimate : Estimate
        The design's estimate of the GTE (the assignment's outcome per user over the
        horizon: orders, conversion or revenue).
    note : str
        The estimator's warning when the data were degenerate, else empty.
    orders : Path or None
        The orders file read.
    context : dict
        The study's measured metrics for this design (empty without ``--study``).
    truth : dict
        A simulated experiment's ``truth.json`` when the orders are the folder's own
        (empty otherwise).
    empty_days : list of str
        Dates of the window without a single order in the file (a missing row counts
        as zero orders, so an export that stops early would bias the estimate).
    """

    assignment: Assignment
    estimate: Estimate
    note: str = ""
    orders: Path | None = None
    context: dict = field(default_factory=dict)
    truth: dict = field(default_factory=dict)
    empty_days: list = field(default_factory=list)


def randomization_test_rng(assignment: Assignment) -> np.random.Generator:
    """Return the design's randomization-test stream of replication 0 of the assignment's seed.

    The same stream a study with that seed gives the design, so the randomization
    p-value of ``simulate`` -> ``analyze`` equals the study's replication 0.
    """
    return np.random.default_rng(stream(assignment.seed, ASSIGNMENT_REPLICATION,
                                        RANDOMIZATION_TEST, design_key(assignment.spec.label)))


def analyse_panel(assignment: Assignment, panel: OutcomePanel) -> tuple[Estimate, str]:
    """Return the design's estimate on a panel, and the estimator's warning (or "")."""
    spec = assignment.spec
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", DegenerateEstimateWarning)
        estimate = kind_of(spec).analyse(spec, panel, assignment.schedule,
                                         confidence=assignment.confidence,
                                         tick_hours=assignment.tick_hours,
                                         rng=randomization_test_rng(assignment))
    notes = [str(w.message) for w in caught if issubclass(w.category, DegenerateEstimateWarning)]
    return estimate, notes[0] if notes else ""


def study_context(study: str | Path, assignment: Assignment) -> dict:
    """Return a study's measured metrics for the assignment's design.

    Raises
    ------
    ResultsError
        When the folder holds no finished study.
    ScenarioError
        When the study is of another market (``--study``) or lacks the design.
    """
    study = Path(study)
    loaded = {}
    for name in ("study.json", "summary.json"):
        try:
            loaded[name] = json.loads((study / name).read_text(encoding="utf-8"))
        except (OSError, json.JSONDecodeError):
            raise ResultsError(f"{study} holds no finished study (no readable {name}); run "
                               "`spillgauge run SCENARIO --out DIR` first") from None
    saved, summary = loaded["study.json"], loaded["summary.json"]
    if market_fingerprint(saved) != assignment.fingerprint:
        raise ScenarioError("--study", f"a study of the assignment's scenario "
                            f"{assignment.scenario_name!r} (same market, calendar and effect; "
                            f"this one is of {saved.get('scenario')!r} or other settings)",
                            str(study))
    outcome = saved.get("settings", {}).get("study", {}).get("outcome", "orders")
    if outcome != assignment.outcome:
        raise ScenarioError("--study", f"a study of the assignment's outcome "
                            f"{assignment.outcome!r} (this study's study.outcome is "
                            f"{outcome!r})", str(study))
    label = assignment.spec.label
    designs = {d.get("label"): d for d in summary.get("designs", [])}
    spec = [d for d in saved.get("settings", {}).get("design", []) if d.get("label") == label]
    mine = design_to_dict(assignment.spec)
    if label not in designs or not spec or spec[0] != json.loads(json.dumps(mine)):
        raise ScenarioError("--study", f"a study holding the design {label!r} with the same "
                            "keys", str(study))
    entry = designs[label]
    keys = ("n_reps", "bias", "relative_bias", "coverage", "power", "ci_width", "rmse",
            "usable_share")
    return {"study": str(study), "seed": saved.get("seed"),
            "alpha": saved["settings"]["study"]["alpha"],
            **{k: entry.get(k) for k in keys},
            "recommended": summary.get("recommendation", {}).get("label") == label}


def analyze_experiment(folder: str | Path, *, orders: str | Path | None = None,
                       study: str | Path | None = None) -> ExperimentAnalysis:
    """Analyse an experiment: its assignment folder, its orders and the design's estimator.

    Parameters
    ----------
    folder : path
        An assignment folder written by ``spillgauge assign`` (or ``simulate``).
    orders : path, optional
        The orders CSV (see :mod:`spillgauge.experiment.orders`); by default the
        folder's ``orders.csv``, or ``pool_orders.csv`` for a design whose arms change
        over time.
    study : path, optional
        A results folder of a study of the same scenario and design: its bias,
        coverage and power are returned as context.

    Raises
    ------
    ScenarioError
        For a bad file, naming the file, line, column and value.
    """
    folder = Path(folder)
    assignment = read_assignment(folder)
    if orders is None:
        orders = folder / (ORDERS if assignment.schedule.is_static else POOL_ORDERS)
        if not orders.is_file() and not assignment.schedule.is_static:
            orders = folder / ORDERS
    orders = Path(orders)
    if not orders.is_file():
        raise ScenarioError("--orders", "an orders CSV file (user_id, date, orders)", str(orders))
    context = study_context(study, assignment) if study is not None else {}
    panel = read_orders(orders, assignment)
    estimate, note = analyse_panel(assignment, panel)
    truth = {}
    if orders.parent.resolve() == folder.resolve() and (folder / TRUTH).is_file():
        try:
            truth = json.loads((folder / TRUTH).read_text(encoding="utf-8"))
        except (OSError, json.JSONDecodeError):
            truth = {}
    per_day = panel.pool_fulfilled.sum(axis=0).reshape(assignment.days, -1).sum(axis=1)
    empty = [str(day.date()) for day, n in zip(
        pd.date_range(assignment.start, periods=assignment.days, freq="D"), per_day) if n == 0]
    return ExperimentAnalysis(assignment=assignment, estimate=estimate, note=note,
                              orders=orders, context=context, truth=truth, empty_days=empty)


def analysis_record(analysis: ExperimentAnalysis) -> dict:
    """Return the analysis as plain data (NaN as null)."""
    estimate, assignment = analysis.estimate, analysis.assignment
    record = {"design": assignment.spec.label, "estimator": estimate.method,
              "scenario": assignment.scenario_name, "orders": str(analysis.orders),
              "estimate": estimate.point, "standard_error": estimate.standard_error,
              "ci_low": estimate.ci_low, "ci_high": estimate.ci_high,
              "confidence": assignment.confidence, "p_value": estimate.p_value,
              "randomization_p_value": estimate.randomization_p_value,
              "n_units": estimate.n_units, "outcome": assignment.outcome,
              "relative_effect": dict(relative_effect(estimate)._asdict()),
              "note": analysis.note,
              "days_without_orders": analysis.empty_days}
    if estimate.diagnostic is not None:
        name = ("launch_diagnostic" if isinstance(estimate.diagnostic, LaunchDiagnostic)
                else "interference_test")
        record[name] = {k: getattr(estimate.diagnostic, k) for k in
                        estimate.diagnostic.__slots__}
    if analysis.context:
        record["study"] = analysis.context
    if analysis.truth.get("gte") is not None:
        record["true_effect"] = analysis.truth["gte"]
        record["true_relative_effect"] = analysis.truth.get("gte_relative")
    return json_safe(record)


def analysis_text(analysis: ExperimentAnalysis) -> str:
    """Return the analysis in words."""
    estimate, assignment = analysis.estimate, analysis.assignment
    level = format_percent(assignment.confidence)
    relative = relative_effect(estimate)
    lines = [f"design {assignment.spec.label} ({estimate.method}), orders from "
             f"{analysis.orders}",
             f"effect on {OUTCOME_UNITS[assignment.outcome]} over {assignment.days} days: "
             f"{format_number(estimate.point, sign=True)}",
             f"  standard error {format_number(estimate.standard_error)}, {level} interval "
             f"[{format_number(estimate.ci_low)}, {format_number(estimate.ci_high)}], "
             f"{estimate.n_units} units used by the estimator"]
    if math.isfinite(relative.point):
        lines.append(f"  relative to the control mean {format_number(estimate.control_mean)}: "
                     f"{format_percent(relative.point, sign=True)}, {level} interval "
                     f"[{format_percent(relative.ci_low, sign=True)}, "
                     f"{format_percent(relative.ci_high, sign=True)}] (Fieller)")
    lines += [
             "  p-value " + (format_number(estimate.p_value) if math.isfinite(estimate.p_value)
                             else "n/a (the estimator gives none)")]
    if math.isfinite(estimate.randomization_p_value):
        lines.append(f"  randomization p-value {format_number(estimate.randomization_p_value)} "
                     f"(Fisher's test of no effect on anyone, {assignment.spec.permutations} "
                     "re-draws of this design's assignment"
                     + (", studentized" if assignment.spec.randomization_statistic
                        == "studentized" else "") + ")")
    if isinstance(estimate.diagnostic, InterferenceDiagnostic):
        d = estimate.diagnostic
        lines.append(f"  test of interference: user half {format_number(d.user_arm_point)}, "
                     f"cluster half {format_number(d.cluster_arm_point)}, p-value "
                     f"{format_number(d.p_value)}")
    if analysis.note:
        lines.append(f"  note: {analysis.note}")
    if analysis.empty_days:
        days = analysis.empty_days
        shown = ", ".join(days[:3]) + (f" and {len(days) - 3} more" if len(days) > 3 else "")
        lines.append(f"  note: no orders at all on {shown}; a missing row counts as zero "
                     "orders, so check that the file covers every day of the experiment")
    gte = analysis.truth.get("gte")
    if gte is not None:
        covers = estimate.ci_low <= gte <= estimate.ci_high
        true_relative = analysis.truth.get("gte_relative")
        lines.append(f"  truth.json: the true effect of this synthetic experiment is "
                     f"{format_number(gte, sign=True)}"
                     + (f" ({format_percent(true_relative, sign=True)} of the control mean)"
                        if isinstance(true_relative, float) and math.isfinite(true_relative)
                        else "") + "; the interval " + ("covers it" if covers else "misses it"))
    context = analysis.context
    if context:
        bias = context.get("relative_bias")
        bias_text = (f"its bias was {format_percent(bias, sign=True)} of the effect"
                     if bias is not None and math.isfinite(bias) else
                     f"its bias was {format_number(context.get('bias') or math.nan, sign=True)} "
                     f"({OUTCOME_UNITS[assignment.outcome]})")
        covered, power = (math.nan if context.get(k) is None else context[k]
                          for k in ("coverage", "power"))
        lines.append(f"in {context.get('n_reps')} simulations of this market this design's "
                     f"interval covered {format_percent(covered)} of the true effects, "
                     f"{bias_text}, and its power was {format_percent(power)}"
                     + (" (the study's recommendation)" if context.get("recommended") else ""))
    return "\n".join(wrap_text(line, indent="    " if line.startswith("  ") else "  ")
                     for line in lines)
