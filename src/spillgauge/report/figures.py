"""Figures of a study: drift of each design, bias against noise, stock paths, switchbacks.

The stock and switchback figures live in :mod:`spillgauge.report.world_figures`
and are re-exported here.

Every plot draws what the study already holds (estimates, metrics, traces,
switchback profiles); nothing here computes a statistic. Each ``plot_*``
function draws on the axes (or figure) it is given, so a notebook can place it
anywhere, and otherwise makes its own figure, detached from pyplot, at the
report's size. :func:`save_figures` writes them all as PNG files with the Agg
renderer. matplotlib is imported inside the functions so ``import spillgauge``
stays fast.

Colours follow the colour-blind-safe palette of Okabe & Ito (2008), "Color
Universal Design", chosen to stay distinct under the common colour-vision
deficiencies; line styles and marker fills carry the rest of the meaning.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from spillgauge.formatting import OUTCOME_UNITS, format_percent
from spillgauge.report._canvas import FIGURE_DPI, FIGURE_SIZE_PX, PALETTE
from spillgauge.report._canvas import TRUTH_COLOUR as _TRUTH
from spillgauge.report._canvas import axes_or_new as _axes
from spillgauge.report._canvas import colour as _colour
from spillgauge.report._canvas import spread as _spread
from spillgauge.report.launch_figures import launch_labels, plot_launches
from spillgauge.report.world_figures import STOCK_DAYS, has_traces, plot_stock, plot_switchback

__all__ = ["FIGURE_DPI", "FIGURE_SIZE_PX", "PALETTE", "STOCK_DAYS", "figure_names",
           "plot_estimates", "plot_bias_sd", "plot_stock", "plot_switchback", "save_figures"]

_BAND = "#BBBBBB"
def _units(study) -> str:
    """The study's outcome unit over the horizon, for axis labels."""
    return OUTCOME_UNITS[study.scenario.study.outcome] + " over the horizon"


def _labels(study) -> list[str]:  # randomized designs (launches: launch_figures.py)
    return [s.label for s in study.scenario.designs if study.designs[s.label].is_randomized]


def plot_estimates(study, ax=None):
    """Draw every replication's estimate per design against the true effect (drift).

    Parameters
    ----------
    study : StudyResult
    ax : matplotlib.axes.Axes, optional
        Axes to draw on; a new figure of the report's size when not given.

    Returns
    -------
    matplotlib.axes.Axes
        One row per design (points and a box of its estimates, a diamond at their
        mean, its bias under its label), a top row with each replication's realised
        GTE, a dashed line at the mean GTE and a band over the replications' GTE range.
    """
    ax = _axes(ax)
    labels = _labels(study)
    frame = study.replications_frame()
    gte = np.array([rep.truth.gte for rep in study.replications], dtype=float)
    gte = gte[np.isfinite(gte)]
    rows = [("true GTE (each replication)", gte, _TRUTH)]
    for i, label in enumerate(labels):
        values = frame.loc[frame["label"] == label, "estimate"].to_numpy(dtype=float)
        rows.append((label, values[np.isfinite(values)], _colour(i)))
    if gte.size:
        ax.axvspan(gte.min(), gte.max(), color=_BAND, alpha=0.35, lw=0,
                   label="range of the replications' GTE")
    ax.axvline(study.truth.gte, color=_TRUTH, lw=1.5, ls="--",
               label=f"mean GTE {study.truth.gte:.3g}")
    for y, (_label, values, colour) in enumerate(rows):
        if values.size == 0:
            continue
        ax.boxplot([values], positions=[y], widths=0.6, orientation="horizontal",
                   showfliers=False, patch_artist=True, manage_ticks=False,
                   boxprops={"facecolor": "none", "edgecolor": colour},
                   medianprops={"color": colour, "lw": 2},
                   whiskerprops={"color": colour}, capprops={"color": colour})
        ax.scatter(values, y + _spread(values.size, 0.5), s=14, color=colour, alpha=0.6,
                   edgecolors="none", zorder=3)
    means = [study.metrics[label].mean_estimate for label in labels]
    ax.scatter(means, range(1, len(labels) + 1), marker="D", s=50, color="white",
               edgecolors=_TRUTH, linewidths=1.5, zorder=5, label="design's mean estimate")
    ticks = [rows[0][0]]
    for label in labels:
        m = study.metrics[label]
        bias = f"bias {m.bias:+.3g}" if math.isfinite(m.bias) else "bias n/a"
        if math.isfinite(m.bias) and math.isfinite(m.relative_bias):
            bias += f" ({format_percent(m.relative_bias, sign=True)})"
        ticks.append(f"{label}\n{bias}")
    ax.set_yticks(range(len(rows)), ticks, fontsize=9)
    for tick, (_, _, colour) in zip(ax.get_yticklabels(), rows):
        tick.set_color(colour)
    ax.set_ylim(len(rows) - 0.4, -0.6)
    ax.set_xlabel(f"estimate of the GTE ({_units(study)})")
    ax.set_title("Estimates against the true effect:\nthe gap from a design's diamond to "
                 "the dashed line is its drift", fontsize=11)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.1), ncol=3, fontsize=9,
              frameon=False)
    ax.grid(axis="x", color="#E5E5E5")
    return ax


# Where a point's label may go, in points from the point (dx, dy, horizontal alignment).
_LABEL_SPOTS = ((9, 6, "left"), (9, -16, "left"), (-9, 6, "right"), (-9, -16, "right"),
                (9, 20, "left"), (-9, 20, "right"), (9, -30, "left"), (-9, -30, "right"))


def _place_labels(ax, items: list, fontsize: float = 9) -> None:
    """Write each point's label at the first nearby spot that overlaps no other label or point.

    ``items`` holds ``((x, y), text, colour, is_bold)``. Text size is estimated
    from the font size (0.62 em per character), so no renderer is needed.
    """
    root = ax.figure.figure  # the top figure, also when ax sits in a SubFigure
    root.draw_without_rendering()  # settle the layout, so data -> display is final
    to_points = 72.0 / root.dpi
    centres = [ax.transData.transform(xy) * to_points for xy, *_ in items]
    taken = [(cx - 6, cy - 6, cx + 6, cy + 6) for cx, cy in centres]
    for (xy, text, colour, is_bold), (cx, cy) in zip(items, centres):
        width, height = 0.62 * fontsize * len(text), 1.2 * fontsize
        chosen = _LABEL_SPOTS[0]
        for spot in _LABEL_SPOTS:
            dx, dy, align = spot
            left = cx + dx if align == "left" else cx + dx - width
            box = (left, cy + dy, left + width, cy + dy + height)
            if not any(box[0] < b[2] and b[0] < box[2] and box[1] < b[3] and b[1] < box[3]
                       for b in taken):
                chosen = spot
                taken.append(box)
                break
        dx, dy, align = chosen
        ax.annotate(text, xy=xy, xytext=(dx, dy), textcoords="offset points", ha=align,
                    va="bottom", fontsize=fontsize, color=colour,
                    fontweight="bold" if is_bold else "normal")


def _rmse_levels(radius: float) -> np.ndarray:
    from matplotlib.ticker import MaxNLocator

    levels = MaxNLocator(nbins=8).tick_values(0.0, radius)
    return levels[(levels > 0) & (levels <= radius * 1.05)]


def plot_bias_sd(study, ax=None):
    """Draw each design's bias against its SD, over circles of equal sqrt(bias^2 + SD^2).

    Parameters
    ----------
    study : StudyResult
    ax : matplotlib.axes.Axes, optional
        Axes to draw on; a new figure of the report's size when not given.

    Returns
    -------
    matplotlib.axes.Axes
        One labelled point per design with bars of +-2 Monte Carlo SE; filled when
        the design is trusted, hollow when not, ringed when recommended; a test of
        interference (a diagnostic) is a grey diamond.
    """
    ax = _axes(ax)
    labels = _labels(study)
    trusted = set(study.recommendation.trusted)
    diagnostics = {label for label, d in study.designs.items() if not d.is_recommendable}
    points = []
    for i, label in enumerate(labels):
        m = study.metrics[label]
        if math.isfinite(m.bias) and math.isfinite(m.sd):
            points.append((i, label, m))
    if not points:
        ax.text(0.5, 0.5, "no design has a finite bias and SD", ha="center",
                transform=ax.transAxes)
        return ax
    extent = max([math.hypot(m.bias, m.sd) for _, _, m in points] + [1e-9])
    theta = np.linspace(0.0, math.pi, 181)
    for k, level in enumerate(_rmse_levels(extent)):
        ax.plot(level * np.cos(theta), level * np.sin(theta), color="#999999", lw=0.8, ls=":",
                label="equal $\\sqrt{bias^2 + SD^2}$" if k == 0 else None)
        for side in (-1, 1):
            ax.annotate(f"{level:.3g}", xy=(side * level, 0), xytext=(0, 2),
                        textcoords="offset points", ha="center", va="bottom", fontsize=8,
                        color="#777777", annotation_clip=True)
    ax.axvline(0.0, color=_TRUTH, lw=1.0, label="no bias")
    for i, label, m in points:
        colour = _colour(i)
        xerr = 2 * m.bias_se if math.isfinite(m.bias_se) else None
        yerr = 2 * m.sd_se if math.isfinite(m.sd_se) else None
        ax.errorbar(m.bias, m.sd, xerr=xerr, yerr=yerr, color=colour, lw=1, capsize=3,
                    zorder=3)
        if label in diagnostics:  # a test of interference: neither trusted nor not
            ax.scatter([m.bias], [m.sd], s=80, zorder=4, marker="D", linewidths=2,
                       edgecolors=colour, color="#dddddd")
        else:
            ax.scatter([m.bias], [m.sd], s=80, zorder=4, linewidths=2, edgecolors=colour,
                       color=colour if label in trusted else "white")
        if label == study.recommendation.label:
            ax.scatter([m.bias], [m.sd], s=320, zorder=2, facecolors="none",
                       edgecolors=_TRUTH, linewidths=1.5)
    biases = [m.bias for _, _, m in points] + [0.0]
    sds = [m.sd for _, _, m in points] + [0.0]
    pad = 0.15 * max(max(biases) - min(biases), max(sds), 1e-9)
    ax.set_xlim(min(biases) - pad, max(biases) + 2.5 * pad)
    ax.set_ylim(0.0, max(sds) * 1.25 + pad * 0.2)
    ax.scatter([], [], s=60, color="#777777", label="trusted")
    ax.scatter([], [], s=60, color="white", edgecolors="#777777", linewidths=2,
               label="not trusted")
    if any(label in diagnostics for _, label, _ in points):
        ax.scatter([], [], s=60, marker="D", color="#dddddd", edgecolors="#777777",
                   linewidths=2, label="diagnostic")
    ax.scatter([], [], s=200, facecolors="none", edgecolors=_TRUTH, label="recommended")
    ax.set_xlabel(f"bias: mean of estimate - GTE ({_units(study)})")
    ax.set_ylabel("SD of the estimates (same units)")
    ax.set_title("Bias against noise: the nearer the origin, the more accurate\n"
                 "(bars: \u00b12 Monte Carlo SE)", fontsize=11)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.1), ncol=6, fontsize=9,
              frameon=False)
    _place_labels(ax, [((m.bias, m.sd), label, _colour(i), label == study.recommendation.label)
                       for i, label, m in points])
    return ax


def figure_names(study) -> list[str]:
    """Return the names of the figures this study can draw (file names without ``.png``)."""
    names = ["estimates", "bias_sd"]
    if has_traces(study):
        names.append("stock")
    if any(len(p) for p in study.switch_profiles().values()):
        names.append("switchback")
    return names + (["launches"] if launch_labels(study) else [])


def _draw(study, name: str):
    if name == "stock":
        return plot_stock(study)
    plot = {"estimates": plot_estimates, "bias_sd": plot_bias_sd,
            "switchback": plot_switchback, "launches": plot_launches}[name]
    return plot(study).figure


def _save_png(fig, path: Path) -> None:
    """Write a figure as PNG atomically (a temporary file in the same folder, then a rename)."""
    from spillgauge.files import write_atomic_with

    write_atomic_with(path, lambda stream: fig.savefig(stream, format="png", dpi=FIGURE_DPI))


def save_figures(study, out_dir: str | Path) -> list[Path]:
    """Write the study's figures as PNG files of :data:`FIGURE_SIZE_PX` pixels.

    Writes ``estimates.png``, ``bias_sd.png``, ``stock.png`` (when a replication
    kept its traces) and ``switchback.png`` (when the study has a switchback).

    Parameters
    ----------
    study : StudyResult
    out_dir : path
        Folder to write into (created when missing).

    Returns
    -------
    list of Path
        The files written, in the order above.

    Examples
    --------
    >>> import tempfile
    >>> from spillgauge.study.run import run_study
    >>> from spillgauge.scenario.reading import parse_scenario
    >>> scenario = parse_scenario({"name": "doc", "calendar": {"days": 2},
    ...     "users": {"count": 200}, "pools": {"count": 4}, "study": {"reps": 2},
    ...     "design": [{"kind": "user"}, {"kind": "switchback", "block_hours": 12}]})
    >>> study = run_study(scenario)
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     [path.name for path in save_figures(study, folder)]
    ['estimates.png', 'bias_sd.png', 'stock.png', 'switchback.png']
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    written = []
    for name in figure_names(study):
        path = out_dir / f"{name}.png"
        _save_png(_draw(study, name), path)
        written.append(path)
    return written
