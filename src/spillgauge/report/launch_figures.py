"""The launches' figure: each analysis of a launch against its own estimand's truth.

Draws what the study holds (each replication's estimate and the launch's truth in
that replication); nothing here computes a statistic.
"""

from __future__ import annotations

import numpy as np

from spillgauge.report._canvas import axes_or_new as _axes
from spillgauge.report._canvas import colour as _colour
from spillgauge.report._canvas import spread as _spread

__all__ = ["launch_labels", "plot_launches"]


def launch_labels(study) -> list[str]:
    """Return the labels of the designs that do not randomize, in scenario order."""
    return [spec.label for spec in study.scenario.designs
            if not study.designs[spec.label].is_randomized]


def plot_launches(study, ax=None):
    """Draw each launch analysis's errors (estimate minus its own truth) per replication.

    One row per launch design: its errors as points and a box, a diamond at their
    mean (the bias), and a dashed line at zero (no error). Rows are labelled with
    the question the design answers.
    """
    ax = _axes(ax)
    labels = launch_labels(study)
    for y, label in enumerate(labels):
        runs = [rep.runs[label] for rep in study.replications]
        errors = np.array([r.estimate.point - r.truth for r in runs], dtype=float)
        errors = errors[np.isfinite(errors)]
        colour = _colour(y)
        if errors.size:
            ax.boxplot([errors], positions=[y], widths=0.6, orientation="horizontal",
                       showfliers=False, patch_artist=True, manage_ticks=False,
                       boxprops={"facecolor": "none", "edgecolor": colour},
                       medianprops={"color": colour, "lw": 2},
                       whiskerprops={"color": colour}, capprops={"color": colour})
            ax.scatter(errors, y + _spread(errors.size, 0.5), s=14, color=colour, alpha=0.6,
                       edgecolors="none", zorder=3)
        ax.scatter([study.designs[label].metrics.bias], [y], marker="D", s=50, color="white",
                   edgecolors="#333333", linewidths=1.5, zorder=5)
    ax.axvline(0.0, color="#333333", lw=1.5, ls="--")
    ticks = [f"{label}\n{study.designs[label].question}" for label in labels]
    ax.set_yticks(range(len(labels)), ticks, fontsize=8)
    ax.set_ylim(len(labels) - 0.4, -0.6)
    ax.set_xlabel("estimate minus its own truth (fulfilled orders per user)")
    ax.set_title("If you do not randomize: each analysis against the truth of its launch "
                 "(diamond = bias)", fontsize=11)
    ax.grid(axis="x", color="#E5E5E5")
    return ax
