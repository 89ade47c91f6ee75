"""A self-contained HTML report of a study: one file, images inline, no network.

The page shows what the study holds (scenario, market, truth, the design table,
the recommendation and the figures) and computes no statistics. Every piece of
text is escaped; the figures are embedded as base64 ``data:`` URIs and the style
sheet is inline, so the file opens anywhere, offline.
"""

from __future__ import annotations

from spillgauge.formatting import format_quantity, outcome_unit
from spillgauge.report.page import CAUTION, figure, render_page
from spillgauge.report.page import escape as _e
from spillgauge.report.page import grid as _grid
from spillgauge.report.page import section as _section
from spillgauge.report.text import SD_RMSE_NOTE, table_notes
from spillgauge.scenario.config import settings_in_use
from spillgauge.statistics.trust import few_replications_note

__all__ = ["SECTION_IDS", "CAPTIONS", "render_html"]

SECTION_IDS = ("recommendation", "designs", "launches", "truth", "figures", "market",
               "scenario", "caution")  # in page order: the answer first, the settings last
CAPTIONS = {
    "estimates": (
        "Where each design's estimates land. Each dot is one replication's estimate of the "
        "GTE by the design named at the left; the box spans the middle half of its "
        "estimates and the diamond marks their mean. The top row holds each replication's "
        "true GTE (all-treated minus all-control world, on the same random numbers), the "
        "dashed line their mean and the grey band their range. A diamond away from the "
        "dashed line is drift (bias); a wide cloud is noise."),
    "bias_sd": (
        "Bias against noise. Each point is one design: its bias (mean estimate minus GTE) "
        "across, the SD of its estimates up; bars are \u00b12 Monte Carlo SE. Dotted arcs "
        "join points of equal \u221a(bias\u00b2 + SD\u00b2): the inner the arc, the more "
        "accurate the design. The table's RMSE is measured against each replication's own "
        "GTE, so it can sit below the arc when the estimates move with the GTE. Filled "
        "points are trusted, hollow ones are not; the ring marks the recommendation. A grey "
        "diamond is a test of interference: a diagnostic, never a unit to choose."),
    "stock": (
        "Stock and lost orders in three worlds of one replication: the world where no one "
        "is treated (grey), the world where everyone is (orange) and one design's world "
        "(dashed blue). Left: the stock of one sample pool hour by hour over the first days; "
        "each jump is a restock, each stretch at zero a stock-out. Right: lost orders so far "
        "over the horizon, summed over the sample pools. Where the design's world loses more "
        "orders than the all-control world, its control users buy from shelves that treated "
        "users emptied (stock-out spillover), which inflates a comparison of treated and "
        "control users."),
    "switchback": (
        "How long after a switch the effect settles, to choose a burn-in. Each line is one "
        "switchback design: treated minus control fulfilled orders per 1,000 users per hour, "
        "by hours since a switch (the start of a block whose arm changed), averaged over blocks and "
        "replications; the band is \u00b12 Monte Carlo SE. The dashed line is the GTE's "
        "level (the true effect spread evenly over the horizon). Blocks start at the same "
        "clock hours, so the daily demand rhythm shapes every line. When the scenario has "
        "carryover, the grey span marks the hours until it fades to 10%: a burn-in (dotted "
        "line) that reaches past it drops the hours the previous arm still blurs; a fall late "
        "in a block is the treated units' stock running out first."),
}
_TITLES = {"estimates": "Drift: estimates against the true effect",
           "bias_sd": "Bias against SD", "stock": "Stock and lost orders in three worlds",
           "switchback": "Switchbacks: the effect after a switch",
           "launches": "If you do not randomize: errors against each launch's truth"}
# Design table: (summary key, header, format, key of its Monte Carlo SE or None).
_COLUMNS = (("mean_estimate", "mean estimate", "{:.3f}", "mean_estimate_se"),
            ("bias", "bias", "{:+.3f}", "bias_se"),
            ("relative_bias", "rel. bias", "{:+.0%}", None),
            ("sd", "SD", "{:.3f}", "sd_se"),
            ("rmse", "RMSE", "{:.3f}", "rmse_se"),
            ("coverage", "CI coverage", "{:.0%}", "coverage_se"),
            ("ci_width", "CI width", "{:.3f}", None),
            ("power", "power", "{:.0%}", "power_se"),
            ("type_s", "Type S", "{:.0%}", None),
            ("type_m", "Type M", "{:.2f}", None),
            # the effect as a share of the design's own control mean, against the relative GTE
            ("relative.mean_estimate", "relative effect", "{:+.1%}", "relative.mean_estimate_se"),
            ("relative.bias", "relative-effect bias", "{:+.1%}", "relative.bias_se"),
            ("relative.coverage", "relative CI coverage", "{:.0%}", "relative.coverage_se"))


def _plain(value: object) -> str:
    """Return a settings or market value in words (nested dicts as ``key value`` pairs)."""
    if isinstance(value, dict):
        return ", ".join(f"{k} {_plain(v)}" for k, v in value.items())
    if isinstance(value, (list, tuple)):
        return ", ".join(_plain(v) for v in value)
    return format_quantity(value)


def _pairs(rows: list[tuple[str, object]]) -> str:
    body = "".join(f'<tr><th class="text">{_e(k)}</th><td class="text">{_e(_plain(v))}</td></tr>'
                   for k, v in rows)
    return f"<table><tbody>{body}</tbody></table>"


def _scenario(study, summary: dict) -> str:
    settings = dict(summary["scenario_settings"])
    parts = [f"<p><strong>{_e(study.scenario.name)}</strong> &middot; {summary['reps']:,} "
             f"replications &middot; seed {_e(summary['seed'])}</p>"]
    if study.scenario.description:
        parts.append(f"<p>{_e(' '.join(study.scenario.description.split()))}</p>")
    designs = settings.pop("design", [])
    tables = [f"<div><h3>{_e(name)}</h3>{_pairs(list(settings_in_use(name, table).items()))}"
              "</div>" for name, table in settings.items() if isinstance(table, dict)]
    others = [(k, v) for k, v in settings.items()
              if not isinstance(v, dict) and k not in ("name", "description")]
    if others:
        tables.append(f"<div><h3>other</h3>{_pairs(others)}</div>")
    parts.append(f'<div class="settings">{"".join(tables)}</div>')
    if designs:
        keys = list(dict.fromkeys(k for d in designs for k in d
                                  if any(e.get(k) not in (None, "") for e in designs)))
        parts.append("<h3>designs</h3>" + _grid(
            keys, [[_e(_plain(d.get(k, ""))) for k in keys] for d in designs], text_columns=2))
    return _section("scenario", "Scenario settings", "".join(parts))


def _market(summary: dict) -> str:
    market = summary.get("market") or {}
    if not market:
        content = "<p>The market summary was not recorded with this study.</p>"
    else:
        content = _pairs([(k.replace("_", " "), v) for k, v in market.items()])
    return _section("market", "Market", content)


def _truth(summary: dict) -> str:
    t = summary["truth"]
    se = t.get("gte_se")
    from spillgauge.report.text import gte_sentence

    lead = (f'<p class="verdict">True GTE {_e(gte_sentence(t, summary))} over the horizon'
            + (f" (Monte Carlo SE {_e(format_quantity(se))})" if se is not None
               else "") + f", over {t['reps']:,} replications.</p>")
    rows = [(outcome_unit(summary), "control_mean", "treated_mean", "{:.4g}"),
            *([("fulfilled orders per user", "control_orders", "treated_orders", "{:.4g}")]
              if outcome_unit(summary) != outcome_unit({}) else []),
            ("demanded orders per user", "control_demanded", "treated_demanded", "{:.4g}"),
            ("fill rate", "control_fill_rate", "treated_fill_rate", "{:.2%}"),
            ("lost-order share", "control_lost_share", "treated_lost_share", "{:.2%}")]
    table = _grid(["", "all control (no one treated)", "all treated (everyone)"],
                  [[_e(name), _e(format_quantity(t.get(c), f)), _e(format_quantity(t.get(tr), f))]
                   for name, c, tr, f in rows])
    note = ("<p>Both worlds run on the same random numbers in each replication, so the GTE "
            "is their difference, free of sampling noise between the two.</p>")
    return _section("truth", "Truth: the two counterfactual worlds", lead + table + note)


def _cell(design: dict, key: str, template: str, se_key: str | None) -> str:
    from spillgauge.report.text import design_value

    value = _e(format_quantity(design_value(design, key), template))
    se = design_value(design, se_key) if se_key else None
    if se is not None and design_value(design, key) is not None:
        shown = template.replace("+", "")
        value += f' <span class="se">\u00b1{_e(format_quantity(se, shown))}</span>'
    return value


def _designs(study, summary: dict) -> str:
    trusted = set(study.recommendation.trusted)
    chosen = study.recommendation.label
    # the verdict beside the label, so that a page narrower than the table still shows it
    header = ["design (estimator)", "trusted", "unit", *(c[1] for c in _COLUMNS)]
    rows, classes = [], []
    for d in summary["designs"]:
        if not d.get("is_randomized", True):
            continue  # shown in "If you do not randomize"
        design = study.designs.get(d["label"])
        if design is not None and not design.is_recommendable:
            mark = '<span class="diagnostic">diagnostic</span>'  # a test, never a unit to choose
        elif d["label"] in trusted:
            mark = '<span class="trusted">\u2713 trusted</span>'
        else:
            mark = '<span class="untrusted">\u2717 not trusted</span>'
        label = (f'<span class="label">{_e(d["label"])}</span>'
                 + (" <strong>(recommended)</strong>" if d["label"] == chosen
                                   else "") + f'<br><span class="se">{_e(d["estimator"])}</span>')
        rows.append([label, mark, _e(d["unit"]),
                     *(_cell(d, key, template, se) for key, _, template, se in _COLUMNS)])
        classes.append("chosen" if d["label"] == chosen else "")
    alpha = study.scenario.study.alpha
    note = (f"<p>Over {summary['reps']:,} replications. Estimates, bias, SD, RMSE and CI "
            f"width are in {_e(outcome_unit(summary))} over the horizon; the relative columns "
            "give each replication's effect as a share of the design's own estimate of the "
            "control mean, with a Fieller interval, against the relative GTE; small grey "
            "numbers are "
            f"Monte Carlo standard errors. A design is trusted when its {1 - alpha:.0%} "
            "confidence interval covers the GTE nearly as often as promised and its bias is "
            "small against its noise. "
            "Type S is the share of significant estimates with the wrong sign, Type M their "
            "mean exaggeration of the effect. A test of interference is a diagnostic: it "
            "says whether units interfere, and is never a unit to randomize by. "
            f"{_e(SD_RMSE_NOTE)}</p>"
            + "".join(f'<p class="note">Note: {_e(n[0].upper() + n[1:])}</p>'
                      for n in table_notes(summary)))
    return _section("designs", "Designs", _grid(header, rows, classes, text_columns=3) + note)


def _launches(summary: dict) -> str:
    """The designs that do not randomize, each against its own truth, and what that costs."""
    launches = [d for d in summary["designs"] if not d.get("is_randomized", True)]
    if not launches:
        return ""
    # the absolute columns, then the relative effect and its coverage (against the launch's
    # own relative truth), as in the printed table
    columns = [*_COLUMNS[:6], *(c for c in _COLUMNS
                                if c[0] in ("relative.mean_estimate", "relative.coverage"))]
    header = ["design (estimator)", "answers", "truth", *(c[1] for c in columns[:6]),
              "effect on users left out", *(c[1] for c in columns[6:])]
    rows = [[_e(d["label"]) + f'<br><span class="se">{_e(d["estimator"])}</span>',
             _e(d["question"]), _e(format_quantity(d.get("truth"), "{:.3f}")),
             *(_cell(d, key, template, se) for key, _, template, se in columns[:6]),
             _e(format_quantity(d.get("left_out_effect"), "{:+.3f}")),
             *(_cell(d, key, template, se) for key, _, template, se in columns[6:])]
            for d in launches]
    note = f"<p>{_e(summary.get('not_randomized', ''))}</p>"
    fits = [f"<li>{_e(d['fit_note'])}</li>" for d in launches if d.get("fit_note")]
    if fits:
        note += ("<p>Balance, overlap and pre-launch fit (means over replications):</p>"
                 f"<ul>{''.join(fits)}</ul>")
    return _section("launches", "If you do not randomize",
                    _grid(header, rows, text_columns=2) + note)


def _recommendation(study, summary: dict) -> str:
    """The answer, first on the page: the verdict, its reason, the truth it was judged on."""
    rec = summary["recommendation"]
    if rec["label"] is None:
        verdict, is_warning = "No design can be trusted in this market.", True
    else:
        verdict = f"Recommended design: {rec['label']}."
        is_warning = not rec["is_trustworthy"]
    if is_warning:
        opening = ('<div class="box warn" role="alert"><p class="verdict">'
                   '<span class="icon" aria-hidden="true">\u26a0</span>Warning: ')
    else:
        opening = '<div class="box ok"><p class="verdict">'
    t = summary["truth"]
    se = t.get("gte_se")
    from spillgauge.report.text import gte_sentence

    gte = (f"True GTE {_e(gte_sentence(t, summary))} over the "
           "horizon" + (f" (Monte Carlo SE {_e(format_quantity(se))})" if se is not None else "")
           + f", over {summary['reps']:,} replications.")
    content = (f"{opening}{_e(verdict)}</p><p class=\"lead\">{_e(rec['reason'])}</p>"
               f"<p>{gte}</p></div>")
    note = few_replications_note(summary["reps"], study.scenario.study.alpha)
    if note:
        content += f'<p class="box warn">{_e(note)}</p>'

    from spillgauge.report.text import interference_lines

    lines = [line.strip() for line in interference_lines(study)]
    if lines:
        content += ("<h3>Diagnostic: test of interference</h3>"
                    + "".join(f"<p>{_e(line)}</p>" for line in lines))
    return _section("recommendation", "Recommendation", content)


def _figures(figures: dict) -> str:
    parts = []
    for name, path in figures.items():
        parts.append(figure(path, name=name, title=_TITLES.get(name, name.replace("_", " ")),
                            caption=CAPTIONS.get(name, "")))
    if not parts:
        parts.append("<p>No figures were drawn for this study.</p>")
    return _section("figures", "Figures", "".join(parts))


def render_html(study, figures: dict) -> str:
    """Return the study's report as one self-contained HTML page.

    Parameters
    ----------
    study : StudyResult
    figures : dict of str to path
        Figure name (``"estimates"``, ``"bias_sd"``, ``"stock"``, ``"switchback"``
        or another) to its PNG file; each is embedded as a ``data:`` URI, in the
        order given, with the caption of :data:`CAPTIONS` that says how to read it.

    Returns
    -------
    str
        The page, with one ``<section>`` per name of :data:`SECTION_IDS`.

    Examples
    --------
    >>> from spillgauge.study.run import run_study
    >>> from spillgauge.scenario.reading import parse_scenario
    >>> scenario = parse_scenario({"name": "doc", "calendar": {"days": 2},
    ...     "users": {"count": 200}, "pools": {"count": 4}, "study": {"reps": 2},
    ...     "design": [{"kind": "user"}]})
    >>> page = render_html(run_study(scenario), {})
    >>> page.startswith("<!DOCTYPE html>"), 'id="recommendation"' in page
    (True, True)
    """
    summary = study.summary()
    title = f"{summary['scenario']}: which randomization unit?"
    parts = {"recommendation": _recommendation(study, summary),
             "designs": _designs(study, summary), "launches": _launches(summary),
             "truth": _truth(summary),
             "figures": _figures(figures), "market": _market(summary),
             "scenario": _scenario(study, summary),
             "caution": _section("caution", "Caution", f"<p>{_e(CAUTION)}</p>")}
    body = "".join(parts[name] for name in SECTION_IDS)
    meta = f"spillgauge study report: {summary['reps']:,} replications, seed {_e(summary['seed'])}"
    return render_page(title, meta, body, nav=[s for s in SECTION_IDS if parts[s]])
