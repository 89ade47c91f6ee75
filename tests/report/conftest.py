"""A small finished study and its written report, shared by the report tests."""

from __future__ import annotations

import dataclasses

import pytest

from spillgauge.report import write_report
from spillgauge.study.result import summarise_study
from spillgauge.study.run import run_study
from tests.conftest import make_scenario

SEED = 11


@pytest.fixture(scope="session")
def tiny_study(tmp_path_factory):
    """A 6-replication study of a 600-user, 4-pool, 7-day market with three designs.

    Its results folder (``study.json``, ``summary.json``, ...) is the study's
    ``out`` folder; the report is not written there yet.
    """
    scenario = make_scenario(
        name="tiny_market",
        description="A tiny market of four shops, restocked nightly, for the report tests.",
        calendar={"days": 7, "diurnal_amplitude": 0.5},
        users={"count": 600, "orders_per_week": 3.0},
        pools={"count": 4, "stock_cover": 1.0},
        effect={"lift": 0.3, "carryover_half_life_hours": 3},
        study={"reps": 6, "seed": SEED},
        design=[{"kind": "user"}, {"kind": "cluster", "clusters": "pools"},
                {"kind": "switchback", "block_hours": 12, "burn_in_hours": 2, "per": "pool"}])
    out = tmp_path_factory.mktemp("tiny_study")
    return run_study(scenario, workers=1, out=out), out


@pytest.fixture(scope="session")
def study(tiny_study):
    return tiny_study[0]


@pytest.fixture(scope="session")
def report_dir(tiny_study):
    """The study's results folder with the full report written into it."""
    study, out = tiny_study
    written = write_report(study, out)
    return out, written


@pytest.fixture(scope="session")
def bare_study(study):
    """The same study without its switchback and without any stock traces."""
    scenario = dataclasses.replace(study.scenario, designs=study.scenario.designs[:2])
    results = [dataclasses.replace(r, traces={}) for r in study.replications]
    return summarise_study(scenario, study.seed, results, study.market_summary)
