"""Tests of spillgauge.report.figures: the PNG files, and that each plot draws the study's data.

The expected values come from the study itself (its replications, metrics,
traces and switchback profiles), read through other paths than the plot code,
and from geometry (a circle of radius c holds x^2 + y^2 = c^2).
"""

from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest
from matplotlib.collections import PathCollection
from matplotlib.figure import Figure
from matplotlib.image import imread

from spillgauge.report import figures
from spillgauge.report.figures import (
    FIGURE_SIZE_PX,
    STOCK_DAYS,
    figure_names,
    plot_bias_sd,
    plot_estimates,
    plot_stock,
    plot_switchback,
    save_figures,
)

ALL_FIGURES = ["estimates", "bias_sd", "stock", "switchback"]


def _fresh_axes():
    fig = Figure()
    return fig, fig.add_subplot()


def test_save_figures_writes_every_png_at_the_fixed_size(report_dir):
    out, written = report_dir  # write_report called save_figures(study, out)
    pngs = [name for name in written if name.endswith(".png")]
    assert pngs == [f"{name}.png" for name in ALL_FIGURES]
    width, height = FIGURE_SIZE_PX
    for name in pngs:
        path = out / name
        assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (RFC 2083)
        image = imread(path)
        assert image.shape[:2] == (height, width), name
        assert float(image[..., :3].std()) > 0.05, f"{name} is blank"
    # Atomic writes leave no temporary file behind.
    assert not [p.name for p in out.iterdir() if p.name.endswith(".tmp")]


def test_figures_stay_out_of_pyplot(study):
    import matplotlib.pyplot as plt

    before = plt.get_fignums()
    ax = plot_switchback(study)
    assert plt.get_fignums() == before  # a detached figure: nothing to close, nothing leaks
    assert type(ax.figure.canvas).__name__ == "FigureCanvasAgg"


@pytest.mark.parametrize("plot", [plot_estimates, plot_bias_sd, plot_switchback])
def test_each_plot_draws_on_the_given_axes(study, plot):
    fig, ax = _fresh_axes()
    assert plot(study, ax=ax) is ax
    assert fig.axes == [ax]  # nothing drawn elsewhere
    assert ax.lines or ax.collections
    assert ax.get_xlabel() and ax.get_title()


@pytest.mark.parametrize("plot", [plot_estimates, plot_bias_sd, plot_switchback])
def test_each_plot_makes_its_own_axes_when_none_is_given(study, plot):
    ax = plot(study)
    width, height = FIGURE_SIZE_PX
    assert tuple(ax.figure.get_size_inches() * ax.figure.dpi) == (width, height)


def test_plot_stock_draws_into_the_given_figure(study):
    fig = Figure()
    assert plot_stock(study, fig=fig) is fig
    assert len(fig.axes) == 2  # stock of one pool, lost orders of the sample pools
    assert all(len(ax.lines) == 3 for ax in fig.axes)  # one line per world
    names = [line.get_label() for line in fig.axes[1].lines]
    assert names[0].startswith("all control") and names[1].startswith("all treated")
    assert names[2] == "design world: user"  # the user-level design is preferred


def test_estimates_plot_shows_every_replication_estimate(study):
    _, ax = _fresh_axes()
    plot_estimates(study, ax=ax)
    strips = [c for c in ax.collections if len(c.get_offsets()) == study.reps]
    frame = study.replications_frame()
    gte = sorted(rep.truth.gte for rep in study.replications)
    expected = [gte] + [sorted(frame.loc[frame["label"] == spec.label, "estimate"])
                        for spec in study.scenario.designs]
    drawn = [sorted(np.asarray(c.get_offsets())[:, 0]) for c in strips]
    assert len(drawn) == len(expected)
    for got, want in zip(drawn, expected):
        np.testing.assert_allclose(got, want)
    # The dashed reference is the mean GTE of the truth summary.
    dashed = [line for line in ax.lines if line.get_linestyle() == "--"]
    assert dashed and np.allclose(dashed[0].get_xdata(), study.truth.gte)
    # Each row's label gives its bias and relative bias as the rest of the tool prints
    # percentages (one decimal below 10%, so a small bias never reads "-0%").
    from spillgauge.formatting import format_percent

    ticks = [t.get_text() for t in ax.get_yticklabels()]
    for spec in study.scenario.designs:
        m = study.metrics[spec.label]
        assert any(t.startswith(spec.label + "\n") and t.endswith(
            f"({format_percent(m.relative_bias, sign=True)})") for t in ticks), ticks


def test_bias_sd_points_are_the_metrics_and_fill_marks_trust(study):
    _, ax = _fresh_axes()
    plot_bias_sd(study, ax=ax)
    trusted = set(study.recommendation.trusted)
    points = [c for c in ax.collections if isinstance(c, PathCollection)
              and len(c.get_offsets()) == 1 and np.asarray(c.get_sizes()).item() == 80]
    assert len(points) == len(study.scenario.designs)
    for spec, point in zip(study.scenario.designs, points):
        m = study.metrics[spec.label]
        np.testing.assert_allclose(point.get_offsets()[0], [m.bias, m.sd])
        is_filled = not np.allclose(point.get_facecolors()[0][:3], 1.0)
        assert is_filled == (spec.label in trusted), spec.label
    labels = {t.get_text() for t in ax.texts}
    assert {spec.label for spec in study.scenario.designs} <= labels


def test_bias_sd_contours_are_circles_around_the_origin(study):
    _, ax = _fresh_axes()
    plot_bias_sd(study, ax=ax)
    arcs = [line for line in ax.lines if line.get_linestyle() == ":"]
    assert arcs
    for arc in arcs:
        radius = np.hypot(arc.get_xdata(), arc.get_ydata())  # x^2 + y^2 = c^2 on a circle
        np.testing.assert_allclose(radius, radius[0])


def test_stock_plot_draws_the_sample_pools_traces(study):
    fig = plot_stock(study)
    traces = study.replications[0].traces
    calendar = study.scenario.calendar
    shown = STOCK_DAYS * 24 // calendar.tick_hours
    stock_ax, lost_ax = fig.axes
    # The pool drawn is the sample pool with most lost orders in the all-treated world.
    k = int(np.argmax(np.sum(traces["worlds"]["all treated"]["lost"], axis=1)))
    for i, world in enumerate(["all control", "all treated", "user"]):
        np.testing.assert_array_equal(stock_ax.lines[i].get_ydata(),
                                      traces["worlds"][world]["stock"][k][:shown])
        # The running total ends at the sample pools' lost orders over the horizon.
        assert lost_ax.lines[i].get_ydata()[-1] == np.sum(traces["worlds"][world]["lost"])
        assert lost_ax.lines[i].get_xdata()[-1] == calendar.days
    assert "days" not in stock_ax.get_ylabel() and "day" in stock_ax.get_xlabel()


def test_switchback_plot_draws_the_profiles_in_hours(study):
    _, ax = _fresh_axes()
    plot_switchback(study, ax=ax)
    profiles = study.switch_profiles()
    spec = study.scenario.designs[2]
    line = next(line for line in ax.lines if line.get_label() == spec.label)
    calendar = study.scenario.calendar
    per_thousand_per_hour = 1000.0 / calendar.tick_hours
    n = len(profiles[spec.label])
    assert n <= 48  # short blocks: one point per tick, at the tick's centre
    np.testing.assert_allclose(line.get_xdata(), (np.arange(n) + 0.5) * calendar.tick_hours)
    np.testing.assert_allclose(line.get_ydata(), profiles[spec.label] * per_thousand_per_hour)
    burn_in = [line for line in ax.lines if "burn-in" in line.get_label()]
    assert len(burn_in) == 1 and np.allclose(burn_in[0].get_xdata(), spec.burn_in_hours)
    assert "hours since a switch" in ax.get_xlabel()
    # The reference: the GTE spread evenly over the horizon's ticks, per 1,000 users per hour.
    dashed = next(line for line in ax.lines if line.get_linestyle() == "--")
    assert math.isclose(dashed.get_ydata()[0],
                        study.truth.gte / calendar.n_ticks * per_thousand_per_hour)
    # The title claims carryover only when the scenario has some.
    assert ("carryover (half-life" in ax.get_title()) == (
        study.scenario.effect.carryover_half_life_hours > 0)


def test_switch_profile_band_is_the_standard_error_over_replications(study):
    # SE of a mean over replications: SD (ddof=1) / sqrt(n), textbook definition.
    bands = study.switch_profile_bands()
    label = study.scenario.designs[2].label
    rows = np.array([rep.traces["switch_profiles"][label] for rep in study.replications],
                    dtype=float)
    mean, se = bands[label]
    np.testing.assert_allclose(mean, rows.mean(axis=0))
    np.testing.assert_allclose(se, rows.std(axis=0, ddof=1) / np.sqrt(len(rows)))
    # Bins of two ticks average the ticks within each replication first.
    mean2, _ = study.switch_profile_bands(bin_ticks=2)[label]
    n = rows.shape[1] // 2 * 2
    np.testing.assert_allclose(mean2[: n // 2], rows[:, :n].reshape(len(rows), -1, 2)
                               .mean(axis=2).mean(axis=0))


def test_figures_without_data_are_left_out(bare_study, tmp_path):
    assert figure_names(bare_study) == ["estimates", "bias_sd"]
    assert [p.name for p in save_figures(bare_study, tmp_path)] == ["estimates.png",
                                                                   "bias_sd.png"]
    with pytest.raises(ValueError, match="no switchback"):
        plot_switchback(bare_study)
    with pytest.raises(ValueError, match="stock traces"):
        plot_stock(bare_study)


def test_importing_the_report_does_not_import_matplotlib():
    code = ("import sys, spillgauge, spillgauge.report, spillgauge.report.figures, "
            "spillgauge.report.html; print('matplotlib' in sys.modules)")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            check=True)
    assert result.stdout.strip() == "False"


def test_module_exports_exist():
    assert all(hasattr(figures, name) for name in figures.__all__)


def test_plot_stock_draws_on_given_axes(study):
    fig = Figure()
    pair = fig.subplots(1, 2)
    assert plot_stock(study, ax=pair) is fig
    assert all(len(ax.lines) == 3 for ax in pair)


def test_the_api_pages_side_by_side_example_keeps_every_text_apart(study, tmp_path,
                                                                    monkeypatch):
    # Runs the code block of docs/api.md as written (with pyplot on the Agg backend), then
    # checks with the renderer's own text extents that no title, axis label, tick label or
    # legend of one panel overlaps one of the other, and that every text lies inside the
    # figure (common practice, no source: a figure is readable when its texts do not touch).
    import re
    from pathlib import Path

    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    page = (Path(__file__).parents[2] / "docs" / "api.md").read_text(encoding="utf-8")
    block = re.search(r"Plots draw on a given matplotlib axes:\s*```python\n(.*?)```", page,
                      re.S).group(1)
    monkeypatch.chdir(tmp_path)
    namespace = {"study": study}
    exec(compile(block, "docs/api.md", "exec"), namespace)  # noqa: S102 (our own docs)
    fig, left, right = namespace["fig"], namespace["left"], namespace["right"]
    assert (tmp_path / "side_by_side.png").is_file()
    renderer = fig.canvas.get_renderer()

    def boxes(ax):
        # each axis's drawn tick labels and label (ticks outside the view are not drawn)
        found = [ax.xaxis.get_tightbbox(renderer), ax.yaxis.get_tightbbox(renderer),
                 ax.title.get_window_extent(renderer)]
        if ax.get_legend() is not None:
            found.append(ax.get_legend().get_window_extent(renderer))
        return found

    width, height = fig.bbox.width, fig.bbox.height
    for a in boxes(left) + boxes(right):
        assert a.x0 >= -1 and a.y0 >= -1 and a.x1 <= width + 1 and a.y1 <= height + 1, a
    for a in boxes(left):
        for b in boxes(right):
            assert not a.overlaps(b), (a, b)
    plt.close(fig)
