"""The printed study: tables that fit 100 columns, numbers unchanged, and the outcome's notes."""

from __future__ import annotations

import numpy as np
import pytest

from spillgauge.report.html import render_html
from spillgauge.report.text import SD_RMSE_NOTE, design_rows, study_markdown, study_text
from spillgauge.statistics.metrics import design_metrics
from spillgauge.study.run import run_study
from tests.conftest import make_scenario


def _study(outcome: str):
    scenario = make_scenario(
        name="table_market", calendar={"days": 7},
        users={"count": 400, "orders_per_week": 3.0}, pools={"count": 8, "stock_cover": 1.0},
        effect={"lift": 0.3}, study={"reps": 3, "seed": 5, "outcome": outcome},
        design=[{"kind": "user"}, {"kind": "cluster", "clusters": "pools"},
                {"kind": "switchback", "block_hours": 24, "label": "switchback-24h-long-label"},
                {"kind": "interference_test", "clusters": "pools"}])
    return run_study(scenario, workers=1)


@pytest.fixture(scope="module", params=["orders", "conversion"])
def study(request):
    return _study(request.param)


def test_the_table_fits_100_columns_and_keeps_every_cell(study):
    text = study_text(study)
    table = text.split("\n\ninterference-test-pools:")[0]  # the tables and their notes
    assert max(len(line) for line in table.splitlines()[2:]) <= 100, table
    words = table.split()
    for row in design_rows(study.summary())[1:]:
        label, unit, *numbers = row
        assert label in words and all(cell in words for cell in numbers), row
        assert " ".join(unit.split()) in " ".join(words)  # the unit, wrapped under the tables
    assert SD_RMSE_NOTE in " ".join(words)
    units = table[table.index("units: "):table.index(SD_RMSE_NOTE)].splitlines()
    # A wrapped line never ends on a number whose unit went to the next line ("24" / "h").
    assert not any(line.rstrip()[-1:].isdigit() for line in units), units


def test_conversion_notes_what_a_period_comparison_measures(study):
    outcome = study.scenario.study.outcome
    text, markdown = " ".join(study_text(study).split()), study_markdown(study)
    html = render_html(study, {})
    said = "first fulfilled order of the horizon falls in it"
    if outcome == "conversion":
        assert "conversion per period (switchback-24h-long-label)" in text
        assert said in text and said in markdown and said in html
    else:
        assert said not in text and said not in markdown and said not in html


def test_sd_exceeds_rmse_when_the_estimates_follow_the_gte():
    # The definitions (DESIGN.md, metrics): SD is numpy's std of the estimates (ddof=1), RMSE
    # the root mean square of estimate - own GTE. Estimates that track a moving GTE closely
    # have a large SD and a small RMSE (arithmetic, no source needed).
    gte = np.array([0.1, 0.5, 0.9, 1.3])
    estimates = gte + np.array([0.01, -0.02, 0.015, -0.005])
    m = design_metrics(estimates, np.full(4, 0.05), estimates - 0.1, estimates + 0.1, gte)
    assert m.sd == pytest.approx(np.std(estimates, ddof=1), rel=1e-12)
    assert m.rmse == pytest.approx(np.sqrt(np.mean((estimates - gte) ** 2)), rel=1e-12)
    assert m.sd > m.rmse


def test_every_printed_paragraph_is_wrapped_to_100_columns(study):
    # The recommendation, the interference verdict and the notes are paragraphs of several
    # sentences; printed, each is wrapped, and joined back it is the summary's text unchanged.
    text = study_text(study)
    assert max(len(line) for line in text.splitlines()) <= 100, text
    joined = " ".join(text.split())
    reason = study.summary()["recommendation"]["reason"]
    assert " ".join(reason.split()) in joined
    assert "estimate, bias, SD and RMSE in " + {
        "orders": "fulfilled orders per user", "conversion":
        "share of users with a fulfilled order"}[study.scenario.study.outcome] in joined
