"""Figures and a small HTML page for a sweep: metrics along a swept key, the recommendation grid.

They draw what :meth:`SweepResult.frame <spillgauge.sweep.sweep.SweepResult.frame>`
holds and compute no statistics: error bars are the frame's Monte Carlo
standard errors (the ``*_se`` columns). Figures share the study report's size,
resolution and palette (:mod:`spillgauge.report.figures`); matplotlib is
imported inside the functions and drawn on the Agg canvas, without pyplot.
"""

from __future__ import annotations

import base64
import html
from pathlib import Path

from spillgauge.formatting import OUTCOME_UNITS, format_value
from spillgauge.report.figures import FIGURE_DPI, FIGURE_SIZE_PX, PALETTE
from spillgauge.report.html import CAUTION, STYLE

__all__ = ["plot_sweep_metric", "plot_recommendation_grid", "save_sweep_figures",
           "render_sweep_html"]

_NO_DESIGN = "no design trusted"
_GREY = "#D9D9D9"
_METRIC_NAMES = {"bias": "bias (orders per user)", "rmse": "RMSE (orders per user)",
                 "coverage": "CI coverage of the GTE", "sd": "SD (orders per user)",
                 "power": "power", "relative_bias": "relative bias",
                 "mean_estimate": "mean estimate (orders per user)"}


def _new_axes():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    width, height = FIGURE_SIZE_PX
    fig = Figure(figsize=(width / FIGURE_DPI, height / FIGURE_DPI), dpi=FIGURE_DPI,
                 layout="constrained")
    FigureCanvasAgg(fig)
    return fig.add_subplot()


def _colour(index: int) -> str:
    return PALETTE[index % len(PALETTE)]


def plot_sweep_metric(sweep_frame, key: str, metric: str, ax=None, *, alpha: float | None = None,
                      unit: str = "orders per user"):
    """Draw one metric of every design along a swept key, with Monte Carlo error bars.

    Parameters
    ----------
    sweep_frame : pandas.DataFrame
        :meth:`SweepResult.frame` of a one-key sweep (one row per value x design).
    key : str
        The swept key (a column of the frame), drawn on the x axis.
    metric : str
        A metric column, e.g. ``"bias"``, ``"rmse"`` or ``"coverage"``; its
        ``<metric>_se`` column, when present, gives +/- 1 SE error bars.
    ax : matplotlib Axes, optional
        Where to draw; a new figure is made when omitted.
    alpha : float, optional
        Level of the CIs; the coverage plot draws the nominal ``1 - alpha``
        (default: the frame's ``alpha`` column, else 0.05).

    Returns
    -------
    matplotlib Axes

    Notes
    -----
    Filled markers are points where the design is trusted, hollow ones where it
    is not. Designs are shifted slightly along x so their error bars do not hide
    each other. The coverage plot has a dashed line at the nominal coverage, the
    bias plot one at zero.
    """
    ax = ax if ax is not None else _new_axes()
    for column in (key, metric, "label"):
        if column not in sweep_frame.columns:
            raise ValueError(f"the frame has no column {column!r}")
    if sweep_frame.duplicated(["label", key]).any():
        raise ValueError(f"the frame holds several rows per design and {key} value; "
                         "select one value of the other swept key first")
    labels = list(dict.fromkeys(sweep_frame["label"]))
    values = sorted(sweep_frame[key].unique())
    span = (values[-1] - values[0]) if len(values) > 1 else 1.0
    shift = 0.012 * span
    for i, label in enumerate(labels):
        rows = sweep_frame[sweep_frame["label"] == label].sort_values(key)
        x = rows[key].to_numpy(dtype=float) + (i - (len(labels) - 1) / 2) * shift
        y = rows[metric].to_numpy(dtype=float)
        se = rows[f"{metric}_se"].to_numpy(dtype=float) if f"{metric}_se" in rows else None
        colour = _colour(i)
        is_diagnostic = "is_diagnostic" in rows and bool(rows["is_diagnostic"].any())
        ax.errorbar(x, y, yerr=se, fmt="--" if is_diagnostic else "-", color=colour, capsize=3,
                    linewidth=1.6, label=f"{label} (diagnostic)" if is_diagnostic else label)
        trusted = rows["trusted"].to_numpy(dtype=bool) if "trusted" in rows else \
            [True] * len(rows)
        for xi, yi, ok in zip(x, y, trusted):
            if is_diagnostic:  # a test of interference: neither trusted nor not
                ax.plot([xi], [yi], marker="D", markersize=6, color=colour,
                        markerfacecolor="#dddddd", markeredgewidth=1.5)
            else:
                ax.plot([xi], [yi], marker="o", markersize=6.5, color=colour,
                        markerfacecolor=colour if ok else "white", markeredgewidth=1.5)
    if metric == "coverage":
        if alpha is None:
            alpha = float(sweep_frame["alpha"].iloc[0]) if "alpha" in sweep_frame else 0.05
        ax.axhline(1 - alpha, color="0.3", linestyle="--", linewidth=1.1,
                   label=f"nominal {1 - alpha:.0%}")
        ax.set_ylim(-0.03, 1.05)
        from matplotlib.ticker import PercentFormatter

        ax.yaxis.set_major_formatter(PercentFormatter(1.0))
    elif metric in ("bias", "relative_bias"):
        ax.axhline(0.0, color="0.3", linestyle="--", linewidth=1.1, label="no bias")
    if len(values) <= 12:  # more ticks than that would overlap; matplotlib then picks them
        ax.set_xticks(values)
        ax.set_xticklabels([format_value(v) for v in values])
    ax.set_xlabel(key)
    ax.set_ylabel(_METRIC_NAMES.get(metric, metric).replace("orders per user", unit))
    name = _METRIC_NAMES.get(metric, metric).split(" (")[0]
    ax.set_title(f"{name[0].upper() + name[1:]} by {key}\n"
                 "bars: ±1 Monte Carlo SE; hollow marker: design not trusted; "
                 "grey diamond: diagnostic", fontsize=10)
    ax.grid(True, color="0.9", linewidth=0.8)
    ax.legend(fontsize=8, frameon=False, loc="best")
    return ax


def plot_recommendation_grid(frame, key_x: str, key_y: str, ax=None):
    """Draw a heatmap of the recommended design at each point of a two-key sweep.

    Parameters
    ----------
    frame : pandas.DataFrame
        :meth:`SweepResult.frame` of a two-key sweep.
    key_x, key_y : str
        The swept keys for the x and y axes.
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib Axes
        Each cell is coloured by the recommended design and labelled with it;
        grey cells are points where no design is trusted.
    """
    from matplotlib.colors import ListedColormap
    from matplotlib.patches import Patch

    ax = ax if ax is not None else _new_axes()
    xs, ys = sorted(frame[key_x].unique()), sorted(frame[key_y].unique())
    labels = list(dict.fromkeys(frame["label"])) + [_NO_DESIGN]
    chosen = {(r[key_x], r[key_y]): r["label"] for r in frame[frame["recommended"]]
              .to_dict("records")}
    codes = [[labels.index(chosen.get((x, y), _NO_DESIGN)) for x in xs] for y in ys]
    colours = [_colour(i) for i in range(len(labels) - 1)] + [_GREY]
    ax.imshow(codes, cmap=ListedColormap(colours), vmin=-0.5, vmax=len(labels) - 0.5,
              origin="lower", aspect="auto")
    size = 9 if len(xs) <= 5 else 7
    for j, row in enumerate(codes):
        for i, code in enumerate(row):
            text = labels[code] if code < len(labels) - 1 else "none"
            ax.text(i, j, text, ha="center", va="center", fontsize=size,
                    color="black" if code == len(labels) - 1 else "white", fontweight="bold")
    ax.set_xticks(range(len(xs)))
    ax.set_xticklabels([format_value(v) for v in xs])
    ax.set_yticks(range(len(ys)))
    ax.set_yticklabels([format_value(v) for v in ys])
    ax.set_xlabel(key_x)
    ax.set_ylabel(key_y)
    ax.set_title("Recommended design at each point (grey: no design trusted)", fontsize=10)
    handles = [Patch(color=colours[i], label=label) for i, label in enumerate(labels)
               if i in {c for row in codes for c in row}]
    ax.legend(handles=handles, fontsize=8, frameon=False, loc="upper left",
              bbox_to_anchor=(1.01, 1.0))
    return ax


def save_sweep_figures(sweep, out: str | Path) -> list[Path]:
    """Write the sweep's figures as PNG files into ``out`` and return their paths.

    One swept key: ``sweep_bias.png``, ``sweep_rmse.png`` and
    ``sweep_coverage.png``. Two keys: ``sweep_grid.png``. Every figure has the
    study report's fixed size (``FIGURE_SIZE_PX``) and is written atomically.
    """
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    frame = sweep.frame()
    keys = [axis.key for axis in sweep.axes]
    outcome = sweep.scenario.study.outcome
    unit = "orders per user" if outcome == "orders" else OUTCOME_UNITS[outcome]
    jobs = ([(f"sweep_{m}.png", lambda ax, m=m: plot_sweep_metric(frame, keys[0], m, ax,
                                                                  unit=unit))
             for m in ("bias", "rmse", "coverage")] if len(keys) == 1 else
            [("sweep_grid.png", lambda ax: plot_recommendation_grid(frame, keys[0], keys[1],
                                                                    ax))])
    paths = []
    for name, draw in jobs:
        ax = _new_axes()
        draw(ax)
        _save_png(ax.figure, out / name)
        paths.append(out / name)
    return paths


def _save_png(fig, path: Path) -> None:
    """Write a figure as PNG atomically (a temporary file in the same folder, then a rename)."""
    from spillgauge.files import write_atomic_with

    write_atomic_with(path, lambda stream: fig.savefig(stream, format="png", dpi=FIGURE_DPI))


def _trust_cell(row: dict) -> str:
    if row.get("is_diagnostic"):
        return '<span class="diagnostic">diagnostic</span>'
    return ('<span class="trusted">\u2713 yes</span>' if row["trusted"] else
            '<span class="untrusted">\u2717 no</span>')


def _table(frame, keys: list[str]) -> str:
    head = [*keys, "design", "bias ± SE", "RMSE", "coverage", "trusted", "recommended"]
    lines = ['<div class="scroll"><table><thead>',
             "<tr>" + "".join(f'<th{" class=text" if i <= len(keys) else ""}>{html.escape(h)}</th>'
                              for i, h in enumerate(head)) + "</tr></thead><tbody>"]
    for row in frame.to_dict("records"):
        cells = [*(html.escape(format_value(row[k])) for k in keys), html.escape(row["label"]),
                 html.escape(f"{row['bias']:+.3g} ± {row['bias_se']:.2g}"),
                 html.escape(f"{row['rmse']:.3g}"), html.escape(f"{row['coverage']:.1%}"),
                 _trust_cell(row), "<strong>recommended</strong>" if row["recommended"] else ""]
        attr = ' class="chosen"' if row["recommended"] else ""
        lines.append(f"<tr{attr}>" + "".join(
            f'<td{" class=text" if i <= len(keys) else ""}>{c}</td>' for i, c in enumerate(cells))
            + "</tr>")
    lines.append("</tbody></table></div>")
    return "\n".join(lines)


def render_sweep_html(sweep, figures: list[str | Path]) -> str:
    """Return a self-contained HTML page of the sweep: answer, figures, table, caution.

    The page shares the study report's style sheet; the answer comes first.
    Figures are embedded as base64 PNG images, so the page needs no other file;
    every text taken from the study is HTML-escaped.
    """
    keys = [axis.key for axis in sweep.axes]
    images = []
    for path in figures:
        data = base64.b64encode(Path(path).read_bytes()).decode("ascii")
        name = html.escape(Path(path).stem)
        images.append(f'<figure id="figure-{name}"><img alt="{name}" '
                      f'src="data:image/png;base64,{data}"></figure>')
    title = f"Sweep of {' and '.join(keys)}: {sweep.scenario.name}"
    return "\n".join([
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{html.escape(title)}</title><style>{STYLE}</style>",
        "</head><body><header>", f"<h1>{html.escape(title)}</h1>",
        f'<p class="meta">spillgauge sweep: {sweep.reps} replications per point, seed '
        f"{sweep.seed} at every point (common random numbers across points).</p></header>",
        '<main><section id="answer"><h2>Answer</h2>',
        f'<div class="box"><p class="lead answer">{html.escape(sweep.answer())}</p></div>'
        "</section>",
        '<section id="figures"><h2>Figures</h2>', *images, "</section>",
        '<section id="points"><h2>Every point and design</h2>', _table(sweep.frame(), keys),
        "</section>",
        f'<section id="caution"><h2>Caution</h2><p>{html.escape(CAUTION)}</p></section>',
        "</main></body></html>"])
