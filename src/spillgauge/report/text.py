"""Plain-text and Markdown renderings of a market, a truth and a study. No statistics here."""

from __future__ import annotations

from spillgauge.formatting import OUTCOME_UNITS, format_cell, format_number, outcome_unit, wrap_text
from spillgauge.statistics.trust import few_replications_note

__all__ = ["market_text", "truth_text", "gte_sentence", "design_value", "study_text", "study_markdown", "design_rows",
           "interference_lines", "launch_rows", "not_randomized_lines", "table_notes",
           "SD_RMSE_NOTE"]

SD_RMSE_NOTE = ("SD can exceed RMSE: RMSE is against each replication's own GTE, SD is the "
                "spread of the estimates.")

_COLUMNS = [("label", "design", "{}"), ("unit", "unit", "{}"),
            ("mean_estimate", "estimate", "{:.3f}"), ("bias", "bias", "{:+.3f}"),
            ("relative_bias", "rel.bias", "{:+.0%}"), ("sd", "SD", "{:.3f}"),
            ("rmse", "RMSE", "{:.3f}"), ("coverage", "coverage", "{:.0%}"),
            ("power", "power", "{:.0%}"),
            # the effect as a share of the control mean, against the relative GTE
            ("relative.mean_estimate", "rel.effect", "{:+.1%}"),
            ("relative.bias", "rel.eff.bias", "{:+.1%}"),
            ("relative.coverage", "rel.cov", "{:.0%}")]


def design_value(design: dict, key: str) -> object:
    """Return a design entry's value at ``key`` (``"relative.bias"`` reads a nested entry)."""
    head, _, rest = key.partition(".")
    value = design.get(head)
    return (value or {}).get(rest) if rest else value


def gte_sentence(truth: dict, summary: dict) -> str:
    """Return "true GTE x <unit> (+y% of the control mean z)" for a summary's truth."""
    relative = truth.get("gte_relative")
    share = (f", {relative:+.1%} of the control mean {format_number(truth['control_mean'])}"
             if relative is not None else "")
    return f"{truth['gte']:.4f} {outcome_unit(summary)}{share}"


def market_text(scenario, market: dict) -> str:
    """Describe a market for ``spillgauge check``."""
    users_per_pool = market["users_per_pool"]
    lines = [f"scenario {scenario.name}: valid", ""]
    if scenario.description:
        lines += ["  " + line for line in scenario.description.strip().splitlines()] + [""]
    cal = scenario.calendar
    lines += [
        f"calendar    {cal.days} days of {cal.n_ticks} ticks ({cal.tick_hours} h each), "
        f"diurnal amplitude {cal.diurnal_amplitude:g}",
        f"demand      trend {cal.trend_per_week:+.1%} a week; daily shocks (log SD, AR(1)) "
        f"market-wide {cal.daily_shock_sd:g} ({cal.daily_shock_autocorrelation:g}), per pool "
        f"{scenario.pools.shock_sd:g} ({scenario.pools.shock_autocorrelation:g}); "
        f"{scenario.pools.factor_count} shared pool factor(s), step SD "
        f"{scenario.pools.factor_sd:g}",
        f"users       {market['users']:,}, {market['orders_per_user_week']:.2f} orders per user "
        "per week on average",
        f"pools       {market['pools']:,} ({users_per_pool['min']}-{users_per_pool['max']} users "
        f"each), restock every {scenario.pools.restock_every_hours} h, lead time "
        f"{scenario.pools.lead_time_hours} h, stock-outs: {scenario.pools.on_stockout}",
        f"graph       {market['graph_model']}, mean degree {market['mean_degree']:.2f}, "
        f"clustering {market['clustering']:.3f}, isolated users {market['isolated_share']:.1%}",
        f"stock       order-up-to level S per pool {market['order_up_to']['min']}-"
        f"{market['order_up_to']['max']} (mean {market['order_up_to']['mean']:.1f})",
    ]
    cc, ct = market["cover_all_control"], market["cover_all_treated"]
    if cc["median"] is not None:
        lines.append(f"supply      S / expected demand per cycle: median {cc['median']:.2f} "
                     f"(min {cc['min']:.2f}) if no one is treated, median {ct['median']:.2f} "
                     f"(min {ct['min']:.2f}) if everyone is")
        tight = ("stock binds on an average cycle even with no one treated"
                 if cc["median"] < 1 else
                 "stock binds when everyone is treated" if ct["median"] < 1 else
                 "stock covers expected demand in both worlds (stock-outs only by chance)")
        growth = market.get("demand_growth_by_end", 1.0)
        if growth > 1 and ct["median"] >= 1 > ct["median"] / growth:
            # the covers are at the trend's starting level; demand grows over the horizon
            late = ("even with no one treated" if cc["median"] / growth < 1
                    else "when everyone is treated")
            tight = (f"stock covers expected demand at the start, but demand grows "
                     f"{growth - 1:.0%} by the end (trend {scenario.calendar.trend_per_week:+.1%}"
                     f" a week), so stock binds on late cycles {late} (median cover on the "
                     f"last cycle {cc['median'] / growth:.2f} with no one treated, "
                     f"{ct['median'] / growth:.2f} with everyone)")
        lines.append(wrap_text(f"            -> {tight}", indent="               "))
    clusters = ", ".join(f"{k} {v:,}" for k, v in market["clusters"].items())
    lines.append(f"clusters    {clusters}")
    effect = scenario.effect
    lines.append(f"effect      lift {effect.lift:+g}, peer lift {effect.peer_lift:+g}, "
                 f"carryover half-life {effect.carryover_half_life_hours:g} h")
    if scenario.study.outcome != "orders":
        users = scenario.users
        basket = (f", basket value mean {users.basket_value_mean:g}, SD {users.basket_value_sd:g}"
                  + (" (or the users file's basket_value)" if users.file else "")
                  if scenario.study.outcome == "revenue" else "")
        lines.append(f"outcome     {scenario.study.outcome}: "
                     f"{OUTCOME_UNITS[scenario.study.outcome]}{basket}")
    lines.append("designs     " + ", ".join(d.label for d in scenario.designs))
    return "\n".join(wrap_text(line, indent=" " * 12) for line in lines)


def truth_text(name: str, seed: int, truth, outcome: str = "orders") -> str:
    """Describe the truth for ``spillgauge truth`` (``outcome``: the scenario's study.outcome)."""
    t = truth
    unit = outcome_unit({"scenario_settings": {"study": {"outcome": outcome}}})
    se = "n/a (one replication)" if t.gte_se != t.gte_se else f"{t.gte_se:.4f}"
    rows = [("fulfilled orders / user", t.control_orders, t.treated_orders, "{:.4f}"),
            ("demanded orders / user", t.control_demanded, t.treated_demanded, "{:.4f}"),
            ("fill rate", t.control_fill_rate, t.treated_fill_rate, "{:.2%}"),
            ("lost-order share", t.control_lost_share, t.treated_lost_share, "{:.2%}")]
    lines = [f"scenario {name}: {t.reps} replications, seed {seed}", "",
             wrap_text(f"GTE = {t.gte:.4f} {unit} over the horizon (Monte Carlo SE {se}); "
                       f"{format_cell('{:+.2%}', t.gte_relative)} of the control mean "
                       f"{format_number(t.control_mean)}", indent="  "), "",
             f"{'':<26}{'all control':>14}{'all treated':>14}"]
    for label, c, tr, template in rows:
        lines.append(f"{label:<26}{format_cell(template, c):>14}{format_cell(template, tr):>14}")
    return "\n".join(lines)


_LAUNCH_COLUMNS = [("label", "design", "{}"), ("question", "answers", "{}"),
                   ("truth", "truth", "{:.3f}"), ("mean_estimate", "estimate", "{:.3f}"),
                   ("bias", "bias", "{:+.3f}"), ("rmse", "RMSE", "{:.3f}"),
                   ("coverage", "coverage", "{:.0%}"), ("left_out_effect", "left out", "{:+.3f}"),
                   # the effect over its own users' all-control mean, against its relative truth
                   ("relative.mean_estimate", "rel.effect", "{:+.1%}"),
                   ("relative.coverage", "rel.cov", "{:.0%}")]


def design_rows(summary: dict) -> list[list[str]]:
    """Return the design table (randomized designs) as formatted cells, header first."""
    rows = [[header for _, header, _ in _COLUMNS]]
    for design in summary["designs"]:
        if design.get("is_randomized", True):
            rows.append([format_cell(template, design_value(design, key))
                         for key, _, template in _COLUMNS])
    return rows


def launch_rows(summary: dict) -> list[list[str]]:
    """Return the table of designs that do not randomize, header first (header only if none)."""
    rows = [[header for _, header, _ in _LAUNCH_COLUMNS]]
    for design in summary["designs"]:
        if not design.get("is_randomized", True):
            rows.append([format_cell(template, design_value(design, key))
                         for key, _, template in _LAUNCH_COLUMNS])
    return rows


def not_randomized_lines(summary: dict, *, markdown: bool = False) -> list[str]:
    """Return the "if you do not randomize" table and its note (nothing without launches)."""
    rows = launch_rows(summary)
    if len(rows) == 1:
        return []
    title = "If you do not randomize (each row against its own truth; never recommended)"
    if markdown:
        table = ["| " + " | ".join(rows[0]) + " |", "|" + "---|" * len(rows[0])]
        table += ["| " + " | ".join(r) + " |" for r in rows[1:]]
        fits = [f"- {d['fit_note']}" for d in summary["designs"] if d.get("fit_note")]
        return ["", f"## {title}", "", *table, "", summary.get("not_randomized", ""),
                *(["", "Balance, overlap and pre-launch fit (means over replications):", "",
                   *fits] if fits else [])]
    fits = [wrap_text(f"  {d['fit_note']}", indent="    ")
            for d in summary["designs"] if d.get("fit_note")]
    units = wrap_text(f"truth, estimate, bias, RMSE and left out (the launch's effect on the "
                      f"users it leaves out) in {outcome_unit(summary)}; coverage is a share of "
                      "replications.", indent="  ")
    return ["", title + ":", *_grouped_by_question(rows), "", units, "",
            wrap_text(summary.get("not_randomized", "")),
            *(["", "Balance, overlap and pre-launch fit (means over replications):", *fits]
              if fits else [])]


def _grouped_by_question(rows: list[list[str]]) -> list[str]:
    """Return the launch tables for a terminal: the absolute columns with the question
    each group answers as a line above its rows instead of a column, then the relative
    columns, so that each table stays within 100 columns."""
    headers = [header for _, header, _ in _LAUNCH_COLUMNS]
    question = headers.index("answers")
    relative = [i for i, (key, _, _) in enumerate(_LAUNCH_COLUMNS) if key.startswith("relative.")]
    absolute = [i for i in range(len(headers)) if i != question and i not in relative]
    lines = _table([[row[i] for i in absolute] for row in rows])
    out, previous = lines[:2], None
    for row, line in zip(rows[1:], lines[2:]):
        if row[question] != previous:
            out.append(f"{row[question]}:")
            previous = row[question]
        out.append(line)
    if any(row[i] != "n/a" for row in rows[1:] for i in relative):
        out += ["", "the effect as a share of its own users' all-control mean, against the "
                    "launch's relative truth:"]
        out += _table([[row[i] for i in [0, *relative]] for row in rows])
    return out


def table_notes(summary: dict) -> list[str]:
    """Return the notes under the design table: what a period-comparing design measures.

    For ``outcome = "conversion"``, a design that compares periods (switchback,
    rollout) sees per period the users whose first fulfilled order fell in it.
    """
    outcome = summary.get("scenario_settings", {}).get("study", {}).get("outcome", "orders")
    labels = [d["label"] for d in summary["designs"]
              if d.get("compares_periods") and d.get("is_randomized", True)]
    if outcome != "conversion" or not labels:
        return []
    return [f"conversion per period ({', '.join(labels)}): a period's outcome is the "
            "share of users whose first fulfilled order of the horizon falls in it. When most users "
            "convert in the first days, later periods are nearly empty, and treated periods "
            "pull first orders forward from the periods after them: the comparison measures "
            "how much sooner users convert, not how many more do, and its bias can reach "
            "thousands of percent. A design that keeps each user in one arm measures "
            "conversion over the horizon."]


def _text_table(summary: dict) -> list[str]:
    """Return the design table for a terminal: absolute columns, then the relative ones.

    The units of the numbers and the unit each design randomizes are listed under
    the tables, wrapped, so that long units (a test of interference's) do not
    widen them.
    """
    rows = design_rows(summary)
    keep = [i for i, (key, _, _) in enumerate(_COLUMNS) if key != "unit"]
    absolute = [i for i in keep if not _COLUMNS[i][0].startswith("relative.")]
    relative = [0] + [i for i in keep if _COLUMNS[i][0].startswith("relative.")]
    lines = _table([[row[i] for i in absolute] for row in rows])
    if any(row[i] != "n/a" for row in rows[1:] for i in relative[1:]):
        lines += ["", "the effect as a share of each design's control mean, against the "
                      "relative GTE:"]
        lines += _table([["design", "rel.effect", "bias", "coverage"]]
                        + [[row[i] for i in relative] for row in rows[1:]])
    units: dict[str, list[str]] = {}
    for design in summary["designs"]:
        if design.get("is_randomized", True):
            units.setdefault(design["unit"], []).append(design["label"])
    text = "; ".join(f"{', '.join(labels)} = {unit}" for unit, labels in units.items())
    lines += ["", wrap_text(f"estimate, bias, SD and RMSE in {outcome_unit(summary)} over the "
                            "horizon; rel.bias = bias / GTE; coverage and power are shares of "
                            "replications.", indent="  "),
              wrap_text("randomization units: " + text, indent="  "), wrap_text(SD_RMSE_NOTE)]
    for note in table_notes(summary):
        lines += ["", wrap_text("note: " + note, indent="  ")]
    return lines


def _table(rows: list[list[str]], *, n_left: int = 1) -> list[str]:
    """Return rows as aligned text: the first ``n_left`` columns left, numbers right."""
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    out = []
    for k, row in enumerate(rows):
        cells = [c.ljust(w) if i < n_left else c.rjust(w)
                 for i, (c, w) in enumerate(zip(row, widths))]
        out.append("  ".join(cells))
        if k == 0:
            out.append("  ".join("-" * w for w in widths))
    return out


def study_text(study) -> str:
    """Describe a study: the truth, the design table and the recommendation."""
    summary = study.summary()
    truth = summary["truth"]
    se = truth.get("gte_se")
    lines = [f"scenario {summary['scenario']}: {summary['reps']} replications, "
             f"seed {summary['seed']}",
             wrap_text(f"true GTE {gte_sentence(truth, summary)}"
                       + (f" (Monte Carlo SE {se:.4f})" if se is not None else ""), indent="  "),
             ""]
    if len(design_rows(summary)) > 1:
        lines += _text_table(summary)
    lines += [wrap_text(line, indent="  ") for line in interference_lines(study)]
    lines += not_randomized_lines(summary)
    rec = summary["recommendation"]
    lines += ["", "recommendation: " + (rec["label"] or "no design can be trusted"),
              wrap_text(rec["reason"])]
    note = few_replications_note(summary["reps"], study.scenario.study.alpha)
    if note:
        lines += ["", wrap_text("note: " + note, indent="  ")]
    return "\n".join(lines)


def interference_lines(study) -> list[str]:
    """Describe each test-of-interference design's verdict (decided by the statistics) in a sentence."""
    lines = []
    alpha = study.scenario.study.alpha
    outcome = study.scenario.study.outcome
    unit = "orders per user" if outcome == "orders" else OUTCOME_UNITS[outcome]
    for design in study.designs.values():
        test = design.interference
        if test is None or not test.n_reps:
            continue
        verdict = ("interference is present, so a user-level test of this market would be biased"
                   if test.is_detected else
                   "no sign of interference beyond the test's false-alarm rate")
        lines.append(f"\n{design.label}: the user-level half and the cluster-level half "
                     f"disagree in {test.rejection_rate:.0%} of replications (level {alpha:.0%}; "
                     f"mean difference {format_cell('{:+.3f}', test.mean_delta)} {unit}): "
                     f"{verdict}.")
    return lines


def study_markdown(study) -> str:
    """Return the study summary as Markdown."""
    summary = study.summary()
    truth = summary["truth"]
    rows = design_rows(summary)
    lines = [f"# {summary['scenario']}: which randomization unit?", "",
             f"{summary['reps']} replications, seed {summary['seed']}. True GTE "
             f"**{gte_sentence(truth, summary)}** over the horizon. The last three "
             "columns give the effect as a share of each design's own control mean "
             "(Fieller interval) against the relative GTE.", "",
             "| " + " | ".join(rows[0]) + " |", "|" + "---|" * len(rows[0])]
    lines += ["| " + " | ".join(r) + " |" for r in rows[1:]]
    lines += ["", SD_RMSE_NOTE]
    for note in table_notes(summary):
        lines += ["", f"_Note: {note[0].upper()}{note[1:]}_"]
    for line in interference_lines(study):  # a paragraph each, after a blank line ending the table
        lines += ["", "Diagnostic, " + line.strip()]
    lines += not_randomized_lines(summary, markdown=True)
    rec = summary["recommendation"]
    lines += ["", f"**Recommendation: {rec['label'] or 'no design can be trusted'}.** "
              + rec["reason"], "",
              *([f"_{note}_", ""] if (note := few_replications_note(
                  summary["reps"], study.scenario.study.alpha)) else []),
              "_Results follow from the model's assumptions; a simulated recommendation is an "
              "input to, not a substitute for, the team's own review of an experiment that "
              "touches real users._"]
    return "\n".join(lines)
