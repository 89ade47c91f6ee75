"""Figures of a plan: power and minimum detectable effect of each design by duration.

They draw the plan's rows and compute nothing. Each function draws on the axes
it is given (a notebook places it anywhere) or makes its own figure, detached
from pyplot, at the report's size and in its colour-blind-safe palette (Okabe &
Ito 2008). Filled markers: the design is trusted at that duration; hollow: not.
"""

from __future__ import annotations

from pathlib import Path

from spillgauge.files import write_atomic_with

__all__ = ["plot_mde_by_days", "plot_power_by_days", "plot_power_by_units", "save_plan_figures",
           "tuned_unit_tables"]

_SIZE_PX, _DPI = (1000, 600), 100  # the study report's figure size and resolution
# Okabe & Ito (2008), as in the study report: blue, vermillion, bluish green, reddish
# purple, orange, sky blue, black.
_PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000")


def _axes(ax):
    if ax is not None:
        return ax
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(_SIZE_PX[0] / _DPI, _SIZE_PX[1] / _DPI), dpi=_DPI,
                 layout="constrained")
    FigureCanvasAgg(fig)
    return fig.add_subplot()


def _by_design(rows: list[dict]) -> dict[str, list[dict]]:
    designs: dict[str, list[dict]] = {}
    for row in rows:
        designs.setdefault(row["label"], []).append(row)
    return {k: sorted(v, key=lambda r: r["days"]) for k, v in designs.items()}


def _draw(ax, rows: list[dict], metric: str, se: str | None) -> list[int]:
    designs = _by_design(rows)
    days = sorted({r["days"] for r in rows})
    span = (days[-1] - days[0]) if len(days) > 1 else 1.0
    for i, (label, line) in enumerate(designs.items()):
        colour = _PALETTE[i % len(_PALETTE)]
        shift = (i - (len(designs) - 1) / 2) * 0.01 * span
        x = [r["days"] + shift for r in line]
        y = [r[metric] for r in line]
        errors = [r[se] for r in line] if se else None
        ax.errorbar(x, y, yerr=errors, fmt="-", color=colour, capsize=3, linewidth=1.6,
                    label=label)
        for xi, yi, row in zip(x, y, line):
            ax.plot([xi], [yi], marker="o", markersize=6.5, color=colour,
                    markerfacecolor=colour if row["trusted"] else "white",
                    markeredgewidth=1.5)
    ax.set_xticks(days)
    ax.set_xlabel("days the test runs (prefixes of the same simulated worlds)")
    ax.grid(True, color="0.9", linewidth=0.8)
    return days


def plot_power_by_days(rows: list[dict], *, power: float, ax=None):
    """Draw each design's measured power by duration, with +/-1 Monte Carlo SE bars.

    Returns the axes. The dashed line is the target power.
    """
    ax = _axes(ax)
    _draw(ax, rows, "power", "power_se")
    ax.axhline(power, color="0.3", linestyle="--", linewidth=1.1, label=f"target {power:.0%}")
    from matplotlib.ticker import PercentFormatter

    ax.set_ylim(-0.03, 1.05)
    ax.yaxis.set_major_formatter(PercentFormatter(1.0))
    ax.set_ylabel("power at the scenario's effect")
    ax.set_title("Power by duration\nbars: \u00b11 Monte Carlo SE; hollow marker: design not "
                 "trusted at that duration", fontsize=10)
    ax.legend(fontsize=8, frameon=False, loc="best")
    return ax


def plot_mde_by_days(rows: list[dict], *, power: float, ax=None):
    """Draw each design's minimum detectable effect by duration, as a share of the control mean.

    Returns the axes. Orders accumulate with the days, so the MDE is drawn
    relative to the control mean over the same first days; the dashed line is
    the true effect (the GTE of those days) on the same scale. A design detects
    it at the target power where its MDE lies below the line.
    """
    ax = _axes(ax)
    days = _draw(ax, rows, "mde_relative", None)
    truth = {r["days"]: abs(r["gte"] / r["control_mean"]) if r["control_mean"] else float("nan")
             for r in rows}
    ax.plot(days, [truth[d] for d in days], color="0.3", linestyle="--", linewidth=1.1,
            label="|GTE| over the first days")
    from matplotlib.ticker import PercentFormatter

    ax.set_ylim(bottom=0)
    ax.yaxis.set_major_formatter(PercentFormatter(1.0))
    ax.set_ylabel(f"MDE at {power:.0%} power, share of the control mean")
    ax.set_title(f"Minimum detectable effect by duration (MDE at {power:.0%} power)\n"
                 "hollow marker: design not trusted at that duration", fontsize=10)
    ax.legend(fontsize=8, frameon=False, loc="best")
    return ax


def tuned_unit_tables(rows: list[dict]) -> dict[int, list[dict]]:
    """Return the tuned design tables whose variants randomize different numbers of units.

    Keyed by table index; each holds its variants' rows at the longest duration,
    sorted by units (e.g. graph clusters at several resolutions).
    """
    longest = max((r["days"] for r in rows), default=None)
    tables: dict[int, list[dict]] = {}
    for r in rows:
        if r["days"] == longest and not r["is_user_level"]:
            tables.setdefault(r.get("table", -1), []).append(r)
    return {k: sorted(v, key=lambda r: r["n_units"]) for k, v in tables.items()
            if len({r["n_units"] for r in v}) > 1}


def plot_power_by_units(rows: list[dict], *, power: float, ax=None):
    """Draw power against the number of randomized units for tuned cluster-type designs.

    One line per tuned ``[[design]]`` table whose variants randomize different
    numbers of units, at the longest duration planned; each point is labelled
    with its variant and its effective sample size. Returns the axes.
    """
    ax = _axes(ax)
    tables = tuned_unit_tables(rows)
    markers = "osD^vP*X"
    for i, variants in enumerate(tables.values()):
        colour = _PALETTE[i % len(_PALETTE)]
        x = [r["n_units"] for r in variants]
        y = [r["power"] for r in variants]
        ax.errorbar(x, y, yerr=[r["power_se"] for r in variants], fmt="-", color=colour,
                    capsize=3, linewidth=1.2)
        for k, (xi, yi, row) in enumerate(zip(x, y, variants)):
            effective = row["effective_n"]
            name = f"{row['label']}: {xi:,.0f} units" + (
                f", {effective:,.0f} effective users" if effective == effective else "")
            ax.plot([xi], [yi], linestyle="none", marker=markers[k % len(markers)],
                    markersize=7.5, color=colour,
                    markerfacecolor=colour if row["trusted"] else "white", markeredgewidth=1.5,
                    label=name)
    ax.axhline(power, color="0.3", linestyle="--", linewidth=1.1, label=f"target {power:.0%}")
    from matplotlib.ticker import PercentFormatter, ScalarFormatter

    ax.set_xscale("log")
    ax.xaxis.set_major_formatter(ScalarFormatter())
    ax.xaxis.set_minor_formatter(ScalarFormatter())
    ax.set_ylim(-0.03, 1.05)
    ax.yaxis.set_major_formatter(PercentFormatter(1.0))
    days = max((r["days"] for r in rows), default=0)
    ax.set_xlabel("units randomized per replication (log scale)")
    ax.set_ylabel("power at the scenario's effect")
    ax.set_title(f"Power by number of clusters at {days} days\nbars: \u00b11 Monte Carlo SE; "
                 "hollow marker: variant not trusted", fontsize=10)
    ax.grid(True, color="0.9", linewidth=0.8)
    ax.legend(fontsize=8, frameon=False, loc="best")
    return ax


def save_plan_figures(plan, out: str | Path) -> list[Path]:
    """Write ``power_by_days.png``, ``mde_by_days.png`` (and ``power_by_units.png`` when
    tuned variants randomize different numbers of units) into ``out``; return their paths."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    drawings = [("power_by_days", plan.plot_power), ("mde_by_days", plan.plot_mde)]
    if tuned_unit_tables(plan.rows):
        drawings.append(("power_by_units", lambda: plot_power_by_units(plan.rows,
                                                                       power=plan.power)))
    for name, draw in drawings:
        fig = draw().figure
        path = out / f"{name}.png"
        write_atomic_with(path, lambda stream, fig=fig: fig.savefig(stream, format="png",
                                                                    dpi=_DPI))
        paths.append(path)
    return paths
