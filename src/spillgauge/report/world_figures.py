"""Figures of one replication's worlds: stock paths, and the effect after a switch.

They draw what the study holds (stock and lost-order traces of sample pools,
switchback profiles and their Monte Carlo SE); nothing here computes a statistic.
matplotlib is imported by the canvas only when a figure is drawn.
"""

from __future__ import annotations

import math

import numpy as np

from spillgauge.report._canvas import TRUTH_COLOUR as _TRUTH
from spillgauge.report._canvas import axes_or_new as _axes
from spillgauge.report._canvas import colour as _colour
from spillgauge.report._canvas import design_labels as _labels
from spillgauge.report._canvas import new_figure as _new_figure

__all__ = ["STOCK_DAYS", "SWITCH_BINS", "plot_stock", "plot_switchback", "has_traces"]

_WORLD_COLOURS = ("#555555", "#D55E00", "#0072B2")  # all control, all treated, design
STOCK_DAYS = 7  # days of hourly stock shown in the stock figure
SWITCH_BINS = 48  # at most this many points along the hours since a switch
_PER_USERS = 1000.0  # switchback effects are shown per 1,000 users


def has_traces(study) -> bool:
    """Return whether a replication of the study kept its stock traces."""
    return bool(_traces(study)[1])


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


def plot_stock(study, fig=None, *, ax=None):
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
    ax : pair of matplotlib.axes.Axes, optional
        The two axes to draw on (stock, lost orders), e.g. from
        ``fig.subplots(1, 2)`` in a notebook; ``fig`` is then their figure.

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
    if ax is not None:
        stock_ax, lost_ax = ax
        fig = stock_ax.figure
    else:
        fig = fig if fig is not None else _new_figure()
        stock_ax, lost_ax = fig.subplots(1, 2, squeeze=True)
    worlds = traces["worlds"]
    design = _design_world(study, worlds)
    shown_worlds = [("all control", "all control (no one treated)", _WORLD_COLOURS[0], "-"),
                    ("all treated", "all treated (everyone)", _WORLD_COLOURS[1], "-")]
    if design is not None:
        shown_worlds.append((design, f"design world: {design}", _WORLD_COLOURS[2], "--"))
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
    if ax is None:
        fig.suptitle(f"Stock and lost orders in three worlds (replication {replication}): a "
                     "shelf at zero loses orders; a steeper line means more lost sales",
                     fontsize=11)
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
    flow = {"orders": "fulfilled orders", "revenue": "revenue",
            "conversion": "first conversions"}[study.scenario.study.outcome]
    ax.set_ylabel(f"treated - control {flow}\nper 1,000 users per hour")
    ax.set_title(title + "\n(band: \u00b12 Monte Carlo SE over replications)", fontsize=10.5)
    ax.legend(fontsize=8.5, framealpha=0.9, loc="best")
    ax.grid(color="#EEEEEE")
    return ax
