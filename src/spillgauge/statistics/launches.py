"""What not randomizing costs: the launches' errors against their own truths, in sentences.

A launch (an opt-in, a regional launch) is never recommended; the report shows it
in its own table and with the note written here, which compares each analysis
of a launch with its own estimand's truth and names the one that comes closest.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from spillgauge.formatting import format_number, format_percent
from spillgauge.statistics.metrics import DesignMetrics

__all__ = ["LaunchRow", "not_randomizing_note", "summarise_launch_fit", "launch_fit_sentence",
           "BALANCE_SMD"]

BALANCE_SMD = 0.1  # |SMD| below this: balanced (Austin 2009; common practice)


@dataclass(frozen=True, slots=True)
class LaunchRow:
    """One launch design over a study, as the note needs it.

    ``kind`` is the design kind (``"opt_in"``); ``question`` says what its truth
    is (e.g. "the effect on the users who opted
    in (ATT)"); ``left_out_effect`` is the launch's true effect on the users it
    left out.
    """

    label: str
    kind: str
    question: str
    truth: float
    left_out_effect: float
    metrics: DesignMetrics


def not_randomizing_note(launches: list[LaunchRow], *, randomized_label: str | None,
                         randomized_metrics: DesignMetrics | None, alpha: float,
                         unit: str = "orders each") -> str:
    """Return the note on what not randomizing costs in this market (empty without launches).

    For each question the launches answer, the closest analysis (smallest RMSE
    against its own truth) and the furthest, with bias, RMSE and coverage (the
    table beside the note has every row); then the users left out and the
    recommended randomized design (its RMSE against the GTE) for comparison.
    ``unit`` follows the effect on the users left out (the study's outcome).

    Examples
    --------
    >>> from spillgauge.statistics.metrics import design_metrics
    >>> m = design_metrics([1.5, 1.7, 1.6, 1.6], [0.1] * 4, [1.3, 1.5, 1.4, 1.4],
    ...                    [1.7, 1.9, 1.8, 1.8], 1.0)
    >>> note = not_randomizing_note([LaunchRow("opt-in-naive", "opt_in", "the ATT", 1.0, -0.2, m)],
    ...                             randomized_label=None, randomized_metrics=None, alpha=0.05)
    >>> note.split(":")[0]
    'If you do not randomize'
    """
    if not launches:
        return ""
    level = f"{1 - alpha:.0%}"

    def judged(row: LaunchRow) -> str:
        m = row.metrics
        relative = (f", {format_percent(m.bias / row.truth, sign=True)}"
                    if math.isfinite(row.truth) and abs(row.truth) > 0 else "")
        return (f"{row.label} (bias {format_number(m.bias, sign=True)} on a truth of "
                f"{format_number(row.truth)}{relative}; RMSE "
                f"{format_number(m.rmse)}, its {level} interval covering the truth in "
                f"{format_percent(m.coverage)} of replications)")

    parts = []
    for question in dict.fromkeys(r.question for r in launches):
        rows = [r for r in launches if r.question == question and math.isfinite(r.metrics.rmse)]
        if not rows:
            continue
        rows.sort(key=lambda r: r.metrics.rmse)
        if len(rows) == 1:
            parts.append(f"for {question}, {judged(rows[0])}")
        else:
            parts.append(f"for {question}, the closest of "
                         f"{len(rows)} analyses is {judged(rows[0])} and the furthest "
                         f"{judged(rows[-1])}")
    sentences = ["If you do not randomize: " + "; ".join(parts) + "."] if parts else []
    by_kind: dict[str, float] = {}
    for r in launches:
        if math.isfinite(r.left_out_effect):
            by_kind.setdefault(r.kind, r.left_out_effect)
    for kind, effect in by_kind.items():
        if abs(effect) < 5e-4:
            continue
        sentences.append(f"The {kind.replace('_', '-')} launch itself moves the users it "
                         f"leaves out by {format_number(effect, sign=True)} {unit}"
                         + (" (stock they lose to those who got it)" if effect < 0 else "")
                         + ": a comparison with them counts that too.")
    if randomized_label is not None and randomized_metrics is not None:
        sentences.append(f"The recommended randomized design, {randomized_label}, has RMSE "
                         f"{format_number(randomized_metrics.rmse)} against the GTE with "
                         f"{format_percent(randomized_metrics.coverage)} coverage: that is "
                         "what randomizing buys.")
    return " ".join(sentences)


def summarise_launch_fit(diagnostics: list) -> dict[str, float]:
    """Return the mean over replications of each launch diagnostic field that was measured.

    ``diagnostics`` holds one :class:`~spillgauge.estimators.estimate.LaunchDiagnostic`
    per replication (None where the estimate failed); NaN fields are left out of
    the means, and a field never measured is left out of the result.

    >>> from types import SimpleNamespace as D
    >>> summarise_launch_fit([D(pre_rmspe=1.0, post_rmspe=float("nan")), D(pre_rmspe=3.0,
    ...                       post_rmspe=float("nan")), None])
    {'pre_rmspe': 2.0}
    """
    names = ("smd_before", "smd_after", "off_support_share", "unmatched_share", "pre_rmspe",
             "post_rmspe")
    out = {}
    for name in names:
        values = [float(getattr(d, name, math.nan)) for d in diagnostics if d is not None]
        values = [v for v in values if math.isfinite(v)]
        if values:
            out[name] = sum(values) / len(values)
    return out


# what the launched pools' daily series counts, per user and day, for each outcome
_DAILY_UNITS = {"orders": "orders per user-day", "revenue": "revenue per user-day",
                "conversion": "first orders per user-day"}


def launch_fit_sentence(label: str, fit: dict[str, float], *, outcome: str = "orders") -> str:
    """Return one sentence on a launch analysis's balance, overlap or pre-launch fit.

    ``outcome`` (the study's) names the unit of the pre-launch fit.

    Examples
    --------
    >>> launch_fit_sentence("opt-in-matching", {"smd_before": 0.62, "smd_after": 0.01,
    ...                     "off_support_share": 0.003, "unmatched_share": 0.012})
    'opt-in-matching: pre-period orders differ by SMD +0.62 before and +0.01 after adjustment (balanced: |SMD| < 0.1, Austin 2009); 0.3% of opted-in users have a propensity score outside the range of the others; matching leaves out 1.2% of them.'
    >>> launch_fit_sentence("launch-sc", {"pre_rmspe": 0.02, "post_rmspe": 0.05})
    'launch-sc: the comparison tracks the launched pools within 0.02 orders per user-day before the launch and 0.05 after (RMSPE; ratio 2.5).'
    >>> launch_fit_sentence("launch-sc", {"pre_rmspe": 1.5}, outcome="revenue")
    'launch-sc: the comparison tracks the launched pools within 1.5 revenue per user-day before the launch.'
    """
    parts = []
    if "smd_before" in fit:
        after = fit.get("smd_after")
        text = f"pre-period orders differ by SMD {format_number(fit['smd_before'], sign=True)}"
        if after is not None:
            verdict = ("balanced" if abs(after) < BALANCE_SMD else "not balanced")
            text += (f" before and {format_number(after, sign=True)} after adjustment "
                     f"({verdict}: |SMD| {'<' if abs(after) < BALANCE_SMD else '>='} "
                     f"{BALANCE_SMD:g}, Austin 2009)")
        parts.append(text)
    if "off_support_share" in fit:
        parts.append(f"{format_percent(fit['off_support_share'])} of opted-in users have a "
                     "propensity score outside the range of the others")
    if "unmatched_share" in fit:
        parts.append(f"matching leaves out {format_percent(fit['unmatched_share'])} of them")
    if "pre_rmspe" in fit:
        text = (f"the comparison tracks the launched pools within "
                f"{format_number(fit['pre_rmspe'])} {_DAILY_UNITS.get(outcome, outcome)} "
                "before the launch")
        if "post_rmspe" in fit:
            ratio = (fit["post_rmspe"] / fit["pre_rmspe"] if fit["pre_rmspe"] > 0
                     else math.inf)
            text += (f" and {format_number(fit['post_rmspe'])} after (RMSPE; ratio "
                     f"{format_number(ratio)})")
        parts.append(text)
    return f"{label}: " + "; ".join(parts) + "." if parts else ""
