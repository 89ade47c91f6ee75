"""The plan's HTML page: the answer, the figures and the table, in the study report's style.

One self-contained file (images inline, no network); it draws what the plan
holds and computes nothing.
"""

from __future__ import annotations

from pathlib import Path

from spillgauge.formatting import OUTCOME_UNITS, format_cell
from spillgauge.report.page import CAUTION, figure, render_page
from spillgauge.report.page import escape as _e
from spillgauge.report.page import grid as _grid
from spillgauge.report.page import section as _section

__all__ = ["render_plan_html", "PLAN_CAPTIONS"]

PLAN_CAPTIONS = {
    "power_by_days": (
        "Power by duration. Each line is one design; each point is the share of replications "
        "whose confidence interval excludes zero when the test stops after that many days "
        "(every duration is the first days of the same simulated worlds, so the lines share "
        "their luck). Bars are \u00b11 Monte Carlo SE; the dashed line is the target power. "
        "Hollow points are durations where the design is not trusted: its power there is "
        "not a promise (a biased design can reject often for the wrong reason)."),
    "mde_by_days": (
        "Minimum detectable effect by duration: the smallest true effect the design's test "
        "detects with the target power, (t critical + z of the power) times the design's "
        "standard error at that duration (Bloom 1995), as a share of the control mean over "
        "the same days (orders accumulate, so the share is what falls with time). The dashed "
        "line is the true effect over those days on the same scale; below it, the design "
        "detects the scenario's effect. "
        "Hollow points: the design is not trusted at that duration."),
    "power_by_units": (
        "Power against the number of units randomized, for design tables tuned over values "
        "that change it (graph clusters at several resolutions, shares, block lengths), at "
        "the longest duration planned. Fewer, larger clusters keep more spillover inside a "
        "cluster but leave fewer independent units: each point names its variant and its "
        "effective sample size (the users a user-level design would need for the same "
        "variance). Hollow points: the variant is not trusted."),
}
_TITLES = {"power_by_days": "Power by duration", "mde_by_days": "Minimum detectable effect",
           "power_by_units": "Power by number of clusters"}
_COLUMNS = (("days", "days", "{}"), ("power", "power", "{:.0%}"),
            ("power_se", "\u00b1 SE", "{:.1%}"), ("mde", "MDE", "{:.3g}"),
            ("mde_relative", "MDE / control", "{:.1%}"), ("bias", "bias", "{:+.3g}"),
            ("coverage", "CI coverage", "{:.0%}"), ("n_units", "units", "{:,.0f}"),
            ("effective_n", "effective users", "{:,.0f}"))


def _cell(template: str, value: object) -> str:
    if isinstance(value, float) and value != value:
        return "n/a"
    return _e(format_cell(template, value))


def _table(plan) -> str:
    # the verdict and its reason beside the label, left-aligned like text
    header = ["design", "trusted", *(h for _, h, _ in _COLUMNS)]
    rows, classes = [], []
    for row in plan.rows:
        trusted = ('<span class="trusted">yes</span>' if row["trusted"] else
                   f'<span class="untrusted">no</span> <span class="se">'
                   f'{_e(row["why_not_trusted"])}</span>')
        rows.append([f'<span class="label">{_e(row["label"])}</span>', trusted,
                     *(_cell(t, row[k]) for k, _, t in _COLUMNS)])
        classes.append("chosen" if row.get("chosen") else "")
    return _grid(header, rows, classes, text_columns=2)


def _cuped(plan) -> str:
    note = ("" if any(c["variance_factor"] == c["variance_factor"] for c in plan.cuped) else
            "<p>The scenario has no pre-period (users.history_days = 0).</p>")
    rows = [[_e(c["days"]), _cell("{:.3f}", c["rho"]), _cell("{:.0%}", c["variance_factor"]),
             _cell("{:.0%}", c.get("strata_pre_period", float("nan"))),
             _cell("{:.0%}", c.get("strata_pools", float("nan")))]
            for c in plan.cuped]
    return note + _grid(["days", "\u03c1 (pre-period, outcome)",
                         "CUPED keeps, 1 \u2212 \u03c1\u00b2", "strata on pre-period keep",
                         "strata on pools keep"], rows, text_columns=0)


def _figures(figures: list[str | Path]) -> str:
    parts = []
    for path in figures:
        name = Path(path).stem
        parts.append(figure(path, title=_TITLES.get(name, name.replace("_", " ")),
                            caption=PLAN_CAPTIONS.get(name, "")))
    return _section("figures", "Figures", "".join(parts))


def render_plan_html(plan, figures: list[str | Path]) -> str:
    """Return the plan as one self-contained HTML page (answer, figures, table, CUPED, caution)."""
    name = plan.scenario.name
    title = f"{name}: how long should it run?"
    days = ", ".join(str(d) for d in plan.days)
    sections = ("answer", "figures", "designs", "cuped", "caution")
    body = "".join([
        _section("answer", "Answer", f'<p class="box lead">{_e(plan.answer())}</p>'),
        _figures(figures),
        _section("designs", "Every design at every duration",
                 "<p>Power is measured at the scenario's effect; the MDE is at "
                 f"{plan.power:.0%} power and level {plan.alpha:g}; MDE and bias are in "
                 f"{_e(OUTCOME_UNITS[plan.scenario.study.outcome])} over the days the test runs, "
                 "MDE / control is the MDE as a share of the control mean over the same days; "
                 "trust is the study's rule "
                 "applied to each duration. Shaded: the design the recommendation rule picks "
                 "among those trusted and at the target power at that duration.</p>"
                 + _table(plan)),
        _section("cuped", "Regression adjustment (CUPED) and stratification",
                 "<p>Share of a user-level estimate's variance each would keep. CUPED keeps "
                 "1 \u2212 \u03c1\u00b2 (Deng, Xu, Kohavi &amp; Walker 2013); treating a fixed "
                 "share within strata (<code>strata = \"pre_period\"</code>: groups of equal "
                 "size by pre-period orders; <code>\"pools\"</code>: home stock pools) keeps "
                 "about the within-stratum share of the outcome's variance (Cochran 1977; "
                 "Imbens &amp; Rubin 2015, ch. 9).</p>" + _cuped(plan)),
        _section("caution", "Caution", f"<p>{_e(CAUTION)}</p>")])
    meta = (f"spillgauge plan: {plan.reps:,} replications, seed {_e(plan.seed)}, durations "
            f"{_e(days)} days (prefixes of the same worlds), target power {plan.power:.0%}")
    return render_page(title, meta, body, nav=sections)
