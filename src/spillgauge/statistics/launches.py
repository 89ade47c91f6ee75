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

__all__ = ["LaunchRow", "not_randomizing_note"]


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
                         randomized_metrics: DesignMetrics | None, alpha: float) -> str:
    """Return the note on what not randomizing costs in this market (empty without launches).

    Each launch analysis: its bias against its own truth (and relative to it), its
    RMSE and how often its interval covers that truth. The closest analysis is the
    one with the smallest RMSE; the users left out and the recommended randomized
    design (its RMSE against the GTE) are named for comparison.

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
    parts = []
    for row in launches:
        m = row.metrics
        relative = (f" ({format_percent(m.bias / row.truth, sign=True)} of it)"
                    if math.isfinite(row.truth) and abs(row.truth) > 0 else "")
        parts.append(f"{row.label} estimates {row.question}, truly "
                     f"{format_number(row.truth)} orders per user, with bias "
                     f"{format_number(m.bias, sign=True)}{relative}, RMSE "
                     f"{format_number(m.rmse)}, and its {level} interval covers the truth in "
                     f"{format_percent(m.coverage)} of replications")
    sentences = ["If you do not randomize: " + "; ".join(parts) + "."]
    for kind in dict.fromkeys(r.kind for r in launches):
        usable = [r for r in launches if r.kind == kind and math.isfinite(r.metrics.rmse)]
        if len(usable) > 1:
            best = min(usable, key=lambda r: r.metrics.rmse)
            sentences.append(f"Closest to {best.question}: {best.label} (RMSE "
                             f"{format_number(best.metrics.rmse)}).")
    by_kind: dict[str, float] = {}
    for r in launches:
        if math.isfinite(r.left_out_effect):
            by_kind.setdefault(r.kind, r.left_out_effect)
    for kind, effect in by_kind.items():
        if abs(effect) < 5e-4:
            continue
        sentences.append(f"The {kind.replace('_', '-')} launch itself moves the users it "
                         f"leaves out by {format_number(effect, sign=True)} orders each"
                         + (" (stock they lose to those who got it)" if effect < 0 else "")
                         + ": a comparison with them counts that too.")
    if randomized_label is not None and randomized_metrics is not None:
        sentences.append(f"The recommended randomized design, {randomized_label}, has RMSE "
                         f"{format_number(randomized_metrics.rmse)} against the GTE with "
                         f"{format_percent(randomized_metrics.coverage)} coverage: that is "
                         "what randomizing buys.")
    return " ".join(sentences)
