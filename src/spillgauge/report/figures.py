"""Figures of a study: drift of each design, bias against noise, stock paths, switchbacks.

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

__all__ = ["FIGURE_DPI", "FIGURE_SIZE_PX", "PALETTE", "STOCK_DAYS", "figure_names",
           "plot_estimates", "plot_bias_sd", "plot_stock", "plot_switchback", "save_figures"]

FIGURE_SIZE_PX = (1000, 600)
FIGURE_DPI = 100
# Okabe & Ito (2008): blue, vermillion, bluish green, reddish purple, orange, sky blue,
# black (yellow left out: too pale on white).
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000")
_TRUTH = "#333333"
_BAND = "#BBBBBB"
_UNITS = "fulfilled orders per user over the horizon"
# Sample pools: four Okabe & Ito colours not read as designs in this figure.
_WORLD_COLOURS = ("#555555", "#D55E00", "#0072B2")  # all control, all treated, design
STOCK_DAYS = 7  # days of hourly stock shown in the stock figure
SWITCH_BINS = 48  # at most this many points along the hours since a switch
_PER_USERS = 1000.0  # switchback effects are shown per 1,000 users


def _colour(index: int) -> str:
    return PALETTE[index % len(PALETTE)]


def _new_figure():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    width, height = FIGURE_SIZE_PX
    fig = Figure(figsize=(width / FIGURE_DPI, height / FIGURE_DPI), dpi=FIGURE_DPI,
                 layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _axes(ax):
    return ax if ax is not None else _new_figure().add_subplot()


def _labels(study) -> list[str]:
    return [spec.label for spec in study.scenario.designs]


def _spread(n: int, width: float) -> np.ndarray:
    """Return fixed offsets in [-width/2, width/2) that spread n points (golden-ratio steps)."""
    return ((np.arange(n) * 0.6180339887) % 1.0 - 0.5) * width


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
    for y, (label, values, colour) in enumerate(rows):
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
            bias += f" ({m.relative_bias:+.0%})"
        ticks.append(f"{label}\n{bias}")
    ax.set_yticks(range(len(rows)), ticks, fontsize=9)
    for tick, (_, _, colour) in zip(ax.get_yticklabels(), rows):
        tick.set_color(colour)
    ax.set_ylim(len(rows) - 0.4, -0.6)
    ax.set_xlabel(f"estimate of the GTE ({_UNITS})")
    ax.set_title("Estimates against the true effect: the gap from a design's diamond to "
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
    ax.set_xlabel(f"bias: mean of estimate - GTE ({_UNITS})")
    ax.set_ylabel("SD of the estimates (same units)")
    ax.set_title("Bias against noise: the nearer the origin, the more accurate "
                 "(bars: +-2 Monte Carlo SE)", fontsize=11)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.1), ncol=6, fontsize=9,
              frameon=False)
    _place_labels(ax, [((m.bias, m.sd), label, _colour(i), label == study.recommendation.label)
                       for i, label, m in points])
    return ax


def _traces(study) -> tuple[int, dict]:
    """Return the first replication that kept its traces, and them (-1, {} when none did)."""
    for rep in study.replications:
        if rep.traces.get("worlds"):
            return rep.replication, rep.traces
    return -1, {}


def _design_world(study, worlds: dict) -> str | None:
    """Return the design whose world is drawn: the user-level design if any, else the first."""
    labels = [spec.label for spec in study.scenario.designs if spec.label in worlds]
    user_level = [label for label in labels if study.designs[label].is_user_level]
    return (user_level or labels or [None])[0]


def plot_stock(study, fig=None):
    """Draw stock and lost orders in the three worlds: one line per world, two panels.

    Left: the stock of one sample pool (the one that loses most orders in the
    all-treated world) hour by hour over the first days (at most
    :data:`STOCK_DAYS`), where each restock and stock-out can be seen. Right:
    the running total of lost orders over the whole horizon, summed over the
    sample pools. The worlds are the all-control one, the all-treated one and
    one design's world (the user-level design when the study has one,
    otherwise the first design).

    Parameters
    ----------
    study : StudyResult
    fig : matplotlib.figure.Figure or SubFigure, optional
        Figure to draw into (it must be empty); a new one of the report's size
        when not given.

    Returns
    -------
    matplotlib.figure.Figure
        With two axes (stock of one pool, lost orders of the sample pools), one
        line per world in each.

    Raises
    ------
    ValueError
        When no replication of the study kept its traces.
    """
    replication, traces = _traces(study)
    if not traces:
        raise ValueError("no replication of this study kept its stock traces")
    fig = fig if fig is not None else _new_figure()
    worlds = traces["worlds"]
    design = _design_world(study, worlds)
    shown_worlds = [("all control", "all control (no one treated)", _WORLD_COLOURS[0], "-"),
                    ("all treated", "all treated (everyone)", _WORLD_COLOURS[1], "-")]
    if design is not None:
        shown_worlds.append((design, f"design world: {design}", _WORLD_COLOURS[2], "--"))
    stock_ax, lost_ax = fig.subplots(1, 2, squeeze=True)
    calendar = study.scenario.calendar
    shown_days = min(calendar.days, STOCK_DAYS)
    pools = traces["pools"]
    lost_treated = np.asarray(worlds["all treated"]["lost"], dtype=float).sum(axis=1)
    k_pool = int(np.argmax(lost_treated))
    total_lost = 0.0
    for world, name, colour, style in shown_worlds:
        stock = np.asarray(worlds[world]["stock"], dtype=float)
        lost = np.asarray(worlds[world]["lost"], dtype=float)
        total_lost += float(lost.sum())
        days = np.arange(1, stock.shape[1] + 1) * calendar.tick_hours / 24.0  # tick ends
        shown = days <= shown_days
        stock_ax.plot(days[shown], stock[k_pool, shown], color=colour, lw=1.4, ls=style,
                      label=name)
        lost_ax.plot(np.r_[0.0, days], np.r_[0.0, np.cumsum(lost.sum(axis=0))], color=colour,
                     lw=1.8, ls=style, label=name)
    stock_ax.set_title(f"stock of pool {pools[k_pool]} (the sample pool losing most orders "
                       "when all are treated)", fontsize=9.5)
    stock_ax.set_xlim(0, shown_days)
    stock_ax.set_ylim(bottom=0)
    stock_ax.set_xlabel(f"day (first {shown_days} of {calendar.days})"
                        if shown_days < calendar.days else "day of the horizon", fontsize=9)
    stock_ax.set_ylabel("stock on the shelf (units)")
    lost_ax.set_title(f"lost orders so far, summed over {len(pools)} sample pools",
                      fontsize=9.5)
    lost_ax.set_xlim(0, calendar.days)
    lost_ax.set_ylim(bottom=0, top=None if total_lost > 0 else 1)
    if total_lost == 0:
        lost_ax.text(0.5, 0.5, "no order lost in these pools", transform=lost_ax.transAxes,
                     ha="center", color="#555555")
    lost_ax.set_xlabel("day of the horizon", fontsize=9)
    lost_ax.set_ylabel("lost orders (running total)")
    for ax in (stock_ax, lost_ax):
        ax.grid(color="#EEEEEE")
    lost_ax.legend(loc="upper left", fontsize=8.5, framealpha=0.9)
    fig.suptitle(f"Stock and lost orders in three worlds (replication {replication}): a shelf "
                 "at zero loses orders; a steeper line means more lost sales", fontsize=11)
    return fig


def plot_switchback(study, ax=None):
    """Draw each switchback's effect by hours since a switch, to help choose a burn-in.

    Parameters
    ----------
    study : StudyResult
    ax : matplotlib.axes.Axes, optional
        Axes to draw on; a new figure of the report's size when not given.

    Returns
    -------
    matplotlib.axes.Axes
        One line per switchback design: treated minus control fulfilled orders per
        1,000 users per hour, by hours since a switch (binned to at most
        :data:`SWITCH_BINS` points), with a band of +-2 Monte Carlo SE over
        replications (``study.switch_profile_bands``); its burn-in as a dotted
        line; the GTE's level (the GTE spread evenly over the horizon) dashed;
        and, when the scenario has carryover, the hours it takes to fade to 10%.

    Raises
    ------
    ValueError
        When the study has no switchback design.
    """
    calendar = study.scenario.calendar
    tick_hours = calendar.tick_hours
    lengths = [len(p) for p in study.switch_profiles().values() if len(p)]
    if not lengths:
        raise ValueError("the study has no switchback design")
    bin_ticks = max(1, -(-max(lengths) // SWITCH_BINS))
    bands = study.switch_profile_bands(bin_ticks=bin_ticks)
    ax = _axes(ax)
    scale = _PER_USERS / tick_hours  # per user-tick -> per 1,000 users per hour
    ax.axhline(0.0, color=_TRUTH, lw=1.0)
    ax.axhline(study.truth.gte / calendar.n_ticks * scale, color=_TRUTH, lw=1.2, ls="--",
               label="GTE's level: the true effect spread evenly over the horizon")
    labels = _labels(study)
    for label, (mean, se) in bands.items():
        i = labels.index(label) if label in labels else len(labels)
        spec = study.scenario.design(label) if label in labels else None
        hours = (np.arange(len(mean)) + 0.5) * bin_ticks * tick_hours  # bin centres
        ax.plot(hours, mean * scale, color=_colour(i), marker="o", ms=3.5, lw=1.6, label=label)
        if np.isfinite(se).any():
            ax.fill_between(hours, (mean - 2 * se) * scale, (mean + 2 * se) * scale,
                            color=_colour(i), alpha=0.18, lw=0)
        if spec is not None and spec.burn_in_hours:
            ax.axvline(spec.burn_in_hours, color=_colour(i), ls=":", lw=1.5,
                       label=f"{label}: end of its {spec.burn_in_hours} h burn-in")
    half_life = study.scenario.effect.carryover_half_life_hours
    if half_life > 0:
        fade = half_life * math.log2(10)  # 2 ** (-t / half_life) = 0.1
        ax.axvspan(0, fade, color="#999999", alpha=0.12, lw=0,
                   label=f"carryover above 10% of its start (half-life {half_life:g} h)")
        title = (f"Effect after a switch: carryover (half-life {half_life:g} h) blurs the first "
                 "hours; a burn-in past the grey span drops them")
    else:
        title = ("Effect after a switch: this scenario has no carryover, so the shape is the "
                 "daily demand rhythm and stock, not a lag")
    ax.set_xlabel("hours since a switch (start of a block whose arm changed)"
                  + (f"; points average {bin_ticks * tick_hours} h" if bin_ticks > 1 else ""))
    ax.set_ylabel("treated - control fulfilled orders\nper 1,000 users per hour")
    ax.set_title(title + "\n(band: \u00b12 Monte Carlo SE over replications)", fontsize=10.5)
    ax.legend(fontsize=8.5, framealpha=0.9, loc="best")
    ax.grid(color="#EEEEEE")
    return ax


def figure_names(study) -> list[str]:
    """Return the names of the figures this study can draw (file names without ``.png``)."""
    names = ["estimates", "bias_sd"]
    if _traces(study)[1]:
        names.append("stock")
    if any(len(p) for p in study.switch_profiles().values()):
        names.append("switchback")
    return names


def _draw(study, name: str):
    if name == "stock":
        return plot_stock(study)
    plot = {"estimates": plot_estimates, "bias_sd": plot_bias_sd,
            "switchback": plot_switchback}[name]
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
