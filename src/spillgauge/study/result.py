"""The typed result of a study, and how finished replications become one.

:func:`summarise_study` turns replications into per-design metrics, the test of
interference's summary and the recommendation (all computed by
:mod:`spillgauge.statistics`); :class:`StudyResult` holds them as typed objects
and writes ``summary.json``'s content.
"""

from __future__ import annotations

import warnings
from collections import Counter
from dataclasses import dataclass, field

import numpy as np

from spillgauge.designs.registry import kind_of
from spillgauge.estimators.estimate import InterferenceDiagnostic, LaunchDiagnostic
from spillgauge.estimators.relative import relative_effect
from spillgauge.files import json_safe, nan_from_null
from spillgauge.formatting import OUTCOME_UNITS, outcome_unit
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.reading import scenario_to_dict
from spillgauge.statistics.interference import InterferenceSummary, summarise_interference_test
from spillgauge.statistics.launches import (
    LaunchRow,
    launch_fit_sentence,
    not_randomizing_note,
    summarise_launch_fit,
)
from spillgauge.statistics.metrics import DesignMetrics, design_metrics
from spillgauge.statistics.recommend import Candidate, Recommendation, recommend
from spillgauge.statistics.truth import TruthSummary, summarise_truth
from spillgauge.study.replication import ReplicationResult

__all__ = ["DesignSummary", "StudyResult", "summarise_study"]


@dataclass(frozen=True, slots=True)
class DesignSummary:
    """One design over a study: what it is, and its metrics.

    Parameters
    ----------
    label, kind, estimator, unit : str
        The design's label, kind, estimator's full name and randomization unit in words.
    params : dict
        The parameters worth naming (those off their default, plus its identity).
    is_user_level : bool
        Whether it randomizes single users.
    is_recommendable : bool
        Whether the recommendation may choose it (False for a diagnostic).
    metrics : DesignMetrics
    interference : InterferenceSummary or None
        For a test of interference.
    failure_note : str
        The most common reason replications gave no estimate (empty when none failed).
    estimand : str
        What the design's estimate targets (``"gte"``, ``"att"``, ``"launched_pools"``);
        its metrics are against this estimand's truth in each replication.
    truth : float
        The mean over replications of the estimand's truth.
    left_out_effect : float
        For a launch: the mean true effect on the users it left out (NaN otherwise).
    is_randomized : bool
        False for a launch (shown apart, never recommended).
    launch_fit : dict
        For a launch: the means over replications of its analysis's balance,
        overlap or pre-launch fit (:class:`~spillgauge.estimators.estimate.LaunchDiagnostic`
        fields that were measured); empty otherwise.
    compares_periods : bool
        Whether the design's estimator compares periods of time (the kind's flag).
    outcome : str
        The study's outcome (``study.outcome``), for the words of the fit note.
    relative : DesignMetrics or None
        The same metrics for the effect as a share of the control mean: each
        replication's ``estimate_relative`` (with its Fieller interval) against
        that replication's ``gte_relative`` (a launch: its own estimand's relative
        truth); None when the design's estimator gives no control mean.
    """

    label: str
    kind: str
    estimator: str
    unit: str
    params: dict
    is_user_level: bool
    is_recommendable: bool
    metrics: DesignMetrics
    interference: InterferenceSummary | None = None
    failure_note: str = ""
    estimand: str = "gte"
    truth: float = float("nan")
    left_out_effect: float = float("nan")
    is_randomized: bool = True
    question: str = "the global treatment effect (GTE)"
    launch_fit: dict = field(default_factory=dict)
    relative: DesignMetrics | None = None
    compares_periods: bool = False
    outcome: str = "orders"

    def to_dict(self) -> dict:
        """Return the design's entry of ``summary.json``."""
        entry = {"label": self.label, "kind": self.kind, "estimator": self.estimator,
                 "unit": self.unit, "estimand": self.estimand, "question": self.question,
                 "truth": json_safe(self.truth),
                 "is_randomized": self.is_randomized,
                 "compares_periods": self.compares_periods, **json_safe(self.metrics.to_dict())}
        if not self.is_randomized:
            entry["left_out_effect"] = json_safe(self.left_out_effect)
            if self.launch_fit:
                entry["balance_and_fit"] = json_safe(self.launch_fit)
                entry["fit_note"] = launch_fit_sentence(self.label, self.launch_fit,
                                                        outcome=self.outcome)
        if self.interference is not None:
            entry["interference_test"] = json_safe(self.interference.to_dict())
        if self.relative is not None:
            entry["relative"] = json_safe(self.relative.to_dict())
        return entry


@dataclass(frozen=True, eq=False)
class StudyResult:
    """Everything a study produced.

    Attributes
    ----------
    scenario : Scenario
    seed, reps : int
    truth : TruthSummary
    designs : dict of str to DesignSummary
        Per design label, in scenario order.
    recommendation : Recommendation
    replications : list of ReplicationResult
        Sorted by replication index.
    market_summary : dict
        The market described in plain data (what ``spillgauge check`` prints).
    not_randomized_note : str
        What not randomizing costs in this market (empty without launch designs).
    """

    scenario: Scenario
    seed: int
    reps: int
    truth: TruthSummary
    designs: dict[str, DesignSummary]
    recommendation: Recommendation
    replications: list[ReplicationResult] = field(repr=False)
    market_summary: dict = field(default_factory=dict, repr=False)
    not_randomized_note: str = ""

    @property
    def metrics(self) -> dict[str, DesignMetrics]:
        """Return each design's metrics by label."""
        return {label: d.metrics for label, d in self.designs.items()}

    def designs_frame(self):
        """Return the design table (one row per design, all metrics) as a DataFrame."""
        import pandas as pd

        return pd.DataFrame(self.summary()["designs"])

    def replications_frame(self):
        """Return one row per replication x design as a DataFrame."""
        import pandas as pd

        rows = [row for rep in self.replications for row in rep.rows()]
        return pd.DataFrame(rows, columns=["replication", "label", "estimate", "se", "ci_low",
                                           "ci_high", "n_units", "gte", "truth",
                                           "estimate_relative", "ci_low_relative",
                                           "ci_high_relative", "gte_relative", "truth_relative"])

    def switch_profiles(self) -> dict:
        """Return each switchback's mean effect per user-tick by ticks since a switch."""
        out = {}
        for rep in self.replications:
            for label, profile in rep.traces.get("switch_profiles", {}).items():
                values = np.array([nan_from_null(v) for v in profile], dtype=float)
                out.setdefault(label, []).append(values)
        return {label: np.nanmean(np.stack(rows), axis=0) if rows else np.array([])
                for label, rows in out.items()}

    def switch_profile_bands(self, bin_ticks: int = 1) -> dict:
        """Return each switchback's effect by ticks since a switch with its Monte Carlo SE.

        Parameters
        ----------
        bin_ticks : int
            Consecutive ticks averaged into one bin (in each replication, before
            the mean and SE over replications).

        Returns
        -------
        dict of str to (mean, se) arrays
            The mean over replications of treated minus control orders per
            user-tick in each bin, and the SE of that mean (SD over replications
            / sqrt(n); NaN where fewer than two replications hold the bin).
        """
        bin_ticks = max(1, int(bin_ticks))
        out = {}
        for rep in self.replications:
            for label, profile in rep.traces.get("switch_profiles", {}).items():
                values = np.array([nan_from_null(v) for v in profile], dtype=float)
                padded = np.full(-(-values.size // bin_ticks) * bin_ticks, np.nan)
                padded[:values.size] = values
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", RuntimeWarning)  # an all-NaN bin stays NaN
                    out.setdefault(label, []).append(
                        np.nanmean(padded.reshape(-1, bin_ticks), axis=1))
        bands = {}
        for label, rows in out.items():
            if not rows:
                continue
            stack = np.stack(rows)
            n = np.sum(np.isfinite(stack), axis=0)
            with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                mean = np.nanmean(stack, axis=0)
                sd = np.nanstd(stack, axis=0, ddof=1)
                se = np.where(n >= 2, sd / np.sqrt(n), np.nan)
            bands[label] = (mean, se)
        return bands

    def interference_test(self, label: str) -> InterferenceSummary:
        """Return a test-of-interference design's summary over the replications."""
        summary = self.designs[label].interference
        if summary is None:
            raise KeyError(f"{label!r} is not a test of interference")
        return summary

    def summary(self) -> dict:
        """Return the content of ``summary.json``."""
        summary = {"scenario": self.scenario.name, "seed": self.seed, "reps": self.reps,
                   "truth": json_safe(self.truth.to_dict()),
                   "designs": [d.to_dict() for d in self.designs.values()],
                   "recommendation": {"label": self.recommendation.label,
                                      "reason": self.recommendation.reason,
                                      "is_trustworthy": self.recommendation.is_trustworthy},
                   "market": self.market_summary,
                   "scenario_settings": scenario_to_dict(self.scenario)}
        if self.not_randomized_note:
            summary["not_randomized"] = self.not_randomized_note
        return summary


def _design_params(spec: DesignSpec) -> dict:
    """Return the design's parameters worth naming: those off their default, plus its identity."""
    kind = kind_of(spec)
    return {key.name: spec.params[key.name] for key in kind.keys
            if key.name in kind.shown_keys or spec.params[key.name] != key.default}


def _summarise_design(spec: DesignSpec, results: list[ReplicationResult], gte: np.ndarray,
                      alpha: float, outcome_scale: float, outcome: str) -> DesignSummary:
    kind = kind_of(spec)
    estimates = [r.runs[spec.label].estimate for r in results]
    column = {name: np.array([getattr(e, name) for e in estimates], dtype=float)
              for name in ("point", "standard_error", "ci_low", "ci_high")}
    runs = [r.runs[spec.label] for r in results]
    left_out = float("nan")
    if kind.estimand != "gte":  # a launch is judged against its own estimand's truth
        gte = np.array([run.truth for run in runs], dtype=float)
        left_out = float(np.nanmean([run.left_out_effect for run in runs])) \
            if np.isfinite([run.left_out_effect for run in runs]).any() else float("nan")
    p_values = None  # power from the randomization test when the design asks for it
    if spec.params.get("inference") == "randomization":
        p_values = np.array([e.randomization_p_value for e in estimates], dtype=float)
    metrics = design_metrics(column["point"], column["standard_error"], column["ci_low"],
                             column["ci_high"], gte, alpha=alpha, outcome_scale=outcome_scale,
                             p_values=p_values)
    relative = None
    relatives = np.array([relative_effect(e) for e in estimates], dtype=float).reshape(-1, 4)
    if np.isfinite(relatives[:, 0]).any():  # a launch: against its own relative truth
        truth_relative = np.array([r.truth.gte_relative if kind.estimand == "gte"
                                   else r.runs[spec.label].truth_relative for r in results],
                                  dtype=float)
        relative = design_metrics(*relatives.T, truth_relative, alpha=alpha,
                                  outcome_scale=float(np.nanmax(np.abs(truth_relative),
                                                                initial=0.0)) or 1.0)
    notes = Counter(r.runs[spec.label].note for r in results if r.runs[spec.label].note)
    interference = None
    diagnostics = [e.diagnostic for e in estimates]
    if diagnostics and all(isinstance(d, InterferenceDiagnostic) for d in diagnostics):
        interference = summarise_interference_test(
            [d.statistic for d in diagnostics], [d.rejects for d in diagnostics],
            [d.rejects_chebyshev for d in diagnostics], [d.delta for d in diagnostics],
            alpha=alpha)
    return DesignSummary(label=spec.label, kind=spec.kind, estimator=kind.estimator_name(spec),
                         unit=kind.describe_unit(spec), params=_design_params(spec),
                         is_user_level=kind.is_user_level,
                         is_recommendable=kind.is_recommendable, metrics=metrics,
                         interference=interference,
                         failure_note=notes.most_common(1)[0][0] if notes else "",
                         estimand=kind.estimand, truth=float(np.mean(gte)),
                         left_out_effect=left_out, is_randomized=kind.is_randomized,
                         question=kind.question, relative=relative,
                         compares_periods=kind.compares_periods, outcome=outcome,
                         launch_fit=summarise_launch_fit(
                             [e.diagnostic if isinstance(e.diagnostic, LaunchDiagnostic) else None
                              for e in estimates]))


def summarise_study(scenario: Scenario, seed: int, results: list[ReplicationResult],
                    market_summary: dict | None = None) -> StudyResult:
    """Turn finished replications into metrics and a recommendation."""
    results = sorted(results, key=lambda r: r.replication)
    truth = summarise_truth([r.truth for r in results])
    gte = np.array([r.truth.gte for r in results])
    alpha = scenario.study.alpha
    # the outcome's scale, for tolerances: fulfilled orders per user in the busier world
    outcome_scale = max(abs(truth.control_mean), abs(truth.treated_mean))
    designs = {spec.label: _summarise_design(spec, results, gte, alpha, outcome_scale,
                                             scenario.study.outcome)
               for spec in scenario.designs}
    candidates = []
    for d in designs.values():
        if not d.is_recommendable:
            continue  # a diagnostic: it is reported, never recommended as a unit
        randomized = np.array([r.runs[d.label].n_randomized for r in results], dtype=float)
        candidates.append(Candidate(label=d.label, is_user_level=d.is_user_level, unit=d.unit,
                                    n_units=float(np.nanmean(randomized)), metrics=d.metrics,
                                    params=d.params, failure_note=d.failure_note))
    if candidates:
        unit = outcome_unit({"scenario_settings": {"study": {"outcome": scenario.study.outcome}}})
        advice = recommend(candidates, gte=truth.gte, gte_se=truth.gte_se, alpha=alpha,
                           unit="orders per user" if scenario.study.outcome == "orders" else unit)
    else:
        advice = Recommendation(label=None, reason="The scenario has no randomized design "
                                "that can be recommended (only tests of interference or "
                                "launches): add user, cluster or switchback designs to "
                                "get a recommended randomization unit.",
                                is_trustworthy=False, trusted=(), ranking=())
    launches = [LaunchRow(label=d.label, kind=d.kind, question=d.question, truth=d.truth,
                          left_out_effect=d.left_out_effect, metrics=d.metrics)
                 for d in designs.values() if not d.is_randomized]
    chosen = advice.label
    note = not_randomizing_note(launches, randomized_label=chosen,
                                randomized_metrics=designs[chosen].metrics if chosen else None,
                                alpha=alpha, unit="orders each" if scenario.study.outcome ==
                                "orders" else f"({OUTCOME_UNITS[scenario.study.outcome]})")
    return StudyResult(scenario=scenario, seed=seed, reps=len(results), truth=truth,
                       designs=designs, recommendation=advice, replications=results,
                       market_summary=market_summary or {}, not_randomized_note=note)
