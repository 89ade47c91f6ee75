"""The plan: prefixes of the same worlds, its agreement with the study, its answer and its files."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from spillgauge.cli import main
from spillgauge.errors import ScenarioError
from spillgauge.panel import OutcomePanel
from spillgauge.plan import plan_study
from spillgauge.plan.answer import answer_plan
from spillgauge.plan.prefix import first_days_of_panel, first_ticks_of_schedule
from spillgauge.schedule import AssignmentSchedule
from spillgauge.study.run import run_study
from tests.conftest import make_scenario
from tests.test_cli import TINY


def _tight(days: int, reps: int, seed: int = 3):
    # Shared stock restocked daily to about one day of demand: user-level designs are
    # biased there, pool clusters are not, so the prefixes carry interference.
    return make_scenario(
        users={"count": 1500, "orders_per_week": 2.0, "history_days": 14},
        pools={"count": 12, "stock_cover": 1.05}, calendar={"days": days},
        graph={"model": "none"}, effect={"lift": 0.3},
        design=[{"kind": "user"}, {"kind": "cluster", "clusters": "pools"},
                {"kind": "switchback", "block_hours": 24}],
        study={"reps": reps, "seed": seed})


def test_prefix_of_panel_and_schedule_by_hand():
    # Hand-worked: 2 users, 3 days, 2 ticks a day; the first 2 days are ticks 0..3.
    panel = OutcomePanel.from_arrays(fulfilled=np.array([[1, 2, 3], [4, 5, 6]]))
    panel = OutcomePanel(fulfilled=panel.fulfilled, demanded=panel.demanded,
                         pool_of_user=panel.pool_of_user, history=np.array([7.0, 8.0]),
                         pool_fulfilled=np.arange(6)[None, :], pool_demanded=np.arange(6)[None, :],
                         pool_lost=np.zeros((1, 6), int), pool_stock=np.zeros((1, 6), int),
                         tick_hours=12)
    cut = first_days_of_panel(panel, 2)
    assert cut.user_fulfilled().tolist() == [3.0, 9.0]
    assert cut.pool_fulfilled.tolist() == [[0, 1, 2, 3]]
    assert cut.history.tolist() == [7.0, 8.0]
    schedule = AssignmentSchedule(unit_of_user=np.zeros(2, dtype=int),
                                  is_treated=np.array([[True, False, True]]),
                                  period_start_ticks=[0, 3, 5], n_ticks=6, unit_kind="market",
                                  randomization="bernoulli", treated_probability=0.5)
    cut_schedule = first_ticks_of_schedule(schedule, 4)
    assert cut_schedule.period_lengths().tolist() == [3, 1]
    assert cut_schedule.treated_probability == 0.5
    with pytest.raises(ValueError, match="days"):
        first_days_of_panel(panel, 4)


def test_plan_at_the_horizon_equals_the_study_bit_for_bit():
    # The plan draws every schedule and world from the study's streams, so at the whole
    # horizon it must give the study's metrics exactly.
    scenario = _tight(days=7, reps=4)
    study = run_study(scenario)
    plan = plan_study(scenario, days=(3, 7))
    for row in (r for r in plan.rows if r["days"] == 7):
        metrics = study.metrics[row["label"]]
        assert (row["bias"], row["coverage"], row["power"], row["rmse"]) == \
            (metrics.bias, metrics.coverage, metrics.power, metrics.rmse)
        assert row["gte"] == study.truth.gte


@pytest.mark.parametrize("days_short", [7])
def test_prefixes_agree_with_separate_studies_within_monte_carlo_error(days_short):
    # The shortcut is honest: stopping a 21-day world after 7 days gives, for every design,
    # the same distribution of estimates as a study of a 7-day horizon (other random numbers):
    # mean and SD agree within 4 Monte Carlo SEs (SD's SE: sd / sqrt(2 (n - 1))).
    reps = 40
    plan = plan_study(_tight(days=21, reps=reps), days=(days_short, 21))
    separate = plan_study(_tight(days=days_short, reps=reps, seed=99), days=(days_short,))
    short = {r["label"]: r for r in plan.rows if r["days"] == days_short}
    for row in separate.rows:
        other = short[row["label"]]
        mean_a, mean_b = other["bias"] + other["gte"], row["bias"] + row["gte"]
        se = math.hypot(other["sd"], row["sd"]) / math.sqrt(reps)
        assert abs(mean_a - mean_b) <= 4 * se, row["label"]
        sd_se = math.hypot(other["sd"], row["sd"]) / math.sqrt(2 * (reps - 1))
        assert abs(other["sd"] - row["sd"]) <= 4 * sd_se, row["label"]
        assert other["trusted"] == row["trusted"] or row["label"] == "switchback-24h"
    # the check has teeth: the user-level design is biased at both lengths
    assert short["user"]["bias"] > 10 * short["user"]["bias_se"]


def _row(label, days, *, power, trusted, mde=0.1, recommendable=True, chosen=False):
    return {"label": label, "kind": "cluster", "days": days, "power": power, "power_se": 0.03,
            "mde": mde, "rmse": mde, "chosen": chosen, "mde_relative": mde / 2, "gte": 0.2,
            "control_mean": 2.0,
            "trusted": trusted, "why_not_trusted": "" if trusted else "has bias +0.1",
            "recommendable": recommendable, "is_user_level": False}


def test_answer_names_the_shortest_trusted_duration_reaching_the_power():
    rows = [_row("a", 7, power=0.9, trusted=False), _row("b", 7, power=0.6, trusted=True),
            _row("a", 14, power=0.95, trusted=False), _row("b", 14, power=0.82, trusted=True),
            _row("x", 7, power=1.0, trusted=True, recommendable=False)]
    text = answer_plan(rows, power=0.8, horizon_days=28)
    assert text.startswith("Run it for at least 14 days with b")
    # the design the recommendation rule chose at that duration is the one named
    rows.append(_row("c", 14, power=0.9, trusted=True, mde=0.2, chosen=True))
    assert answer_plan(rows, power=0.8, horizon_days=28).startswith(
        "Run it for at least 14 days with c")
    rows.pop()
    text = answer_plan(rows, power=0.9, horizon_days=14)
    assert text.startswith("No trusted design reaches 90% power within 14 days (the whole "
                           "horizon)")
    assert "82% (b at 14 days)" in text
    rows = [_row("a", 7, power=0.9, trusted=False)]
    assert "No design is trusted" in answer_plan(rows, power=0.8, horizon_days=7)


def test_plan_refuses_bad_input_by_name():
    scenario = _tight(days=7, reps=2)
    with pytest.raises(ScenarioError, match=r"--days .*\[1, calendar.days=7\]; got 8"):
        plan_study(scenario, days="3,8")
    with pytest.raises(ScenarioError, match=r"--days"):
        plan_study(scenario, days="a")
    with pytest.raises(ScenarioError, match=r"--power"):
        plan_study(scenario, power=1.5)
    with pytest.raises(ScenarioError, match=r"--reps"):
        plan_study(scenario, reps=1)


def test_cli_plan_writes_its_files_and_json(tmp_path, capsys):
    path = tmp_path / "s.toml"
    path.write_text(TINY)
    out = tmp_path / "out"
    assert main(["plan", str(path), "--days", "3,7", "--out", str(out), "--quiet",
                 "--workers", "1", "--json"]) == 0
    printed = json.loads(capsys.readouterr().out)
    assert printed["days"] == [3, 7] and printed["answer"]
    assert printed["scenario"] == "tiny"
    for name in ("plan.csv", "plan.json", "power_by_days.png", "mde_by_days.png", "plan.html"):
        assert (out / name).stat().st_size > 0
    header = (out / "plan.csv").read_text().splitlines()[0].split(",")
    assert header[:9] == ["label", "kind", "days", "reps", "power", "power_se", "mde",
                          "mde_relative", "bias"]
    assert {"coverage", "trusted"} <= set(header)
    # On the page each row's verdict (and its reason) is the left-aligned cell beside the label.
    page = (out / "plan.html").read_text()
    rows = page.split('id="designs"')[1].split("</table>")[0].split("<tr")[2:]
    verdicts = [row.split("<td")[2] for row in rows]
    assert verdicts and all(v.startswith(' class="text">') for v in verdicts)
    assert all((">yes</span>" in v) != (">no</span>" in v) for v in verdicts)
    assert main(["plan", str(path), "--days", "9", "--out", str(out)]) == 2
    assert "--days must be days in [1, calendar.days=7]; got 9" in capsys.readouterr().err
    assert main(["plan", str(path), "--scheduler", "tcp://x:1", "--out", str(out)]) == 2
    assert "--scheduler must be left out" in capsys.readouterr().err


def test_variant_sentence_names_the_rule_choice_and_the_trade_off():
    from spillgauge.plan.answer import answer_variants

    rows = [dict(_row("sb-6h", 28, power=1.0, trusted=False), table=2, bias=0.5, sd=0.1),
            dict(_row("sb-24h", 28, power=1.0, trusted=True), table=2, bias=0.01, sd=0.2,
                 variant_chosen=True),
            dict(_row("sb-48h", 28, power=1.0, trusted=True), table=2, bias=0.0, sd=0.3),
            dict(_row("user", 28, power=1.0, trusted=True), table=0, bias=0.0, sd=0.1)]
    text = answer_variants(rows)
    assert text.startswith("Of the tuned variants (sb-6h, sb-24h, sb-48h), use sb-24h at 28 "
                           "days")
    assert "sb-6h has bias +0.5, sb-48h SD 0.3." in text
    assert "user" not in text


def test_power_by_units_draws_tuned_tables_whose_unit_counts_differ():
    from spillgauge.plan.figures import plot_power_by_units, tuned_unit_tables

    rows = [dict(_row(f"cluster-graph-r{r}", 14, power=p, trusted=True), table=1, n_units=n,
                 effective_n=n * 10.0, is_user_level=False)
            for r, n, p in ((0.5, 20, 0.6), (1, 40, 0.7), (2, 80, 0.9))]
    rows.append(dict(_row("user", 14, power=1.0, trusted=False), table=0, n_units=1000,
                      effective_n=1000.0, is_user_level=True))
    tables = tuned_unit_tables(rows)
    assert list(tables) == [1] and [r["n_units"] for r in tables[1]] == [20, 40, 80]
    ax = plot_power_by_units(rows, power=0.8)
    assert [t.get_text() for t in ax.get_legend().get_texts()][:1] == [
        "cluster-graph-r0.5: 20 units, 200 effective users"]
    assert tuned_unit_tables(rows[:1] + rows[3:]) == {}


def test_plan_leaves_out_launches_and_the_interference_test():
    # The plan sizes a randomized test of the GTE: a launch (judged against its own
    # estimand) and the diagnostic test of interference have no GTE power to plan.
    scenario = make_scenario(users={"count": 400, "history_days": 7}, design=[{"kind": "user"},
                                     {"kind": "interference_test"},
                                     {"kind": "opt_in", "estimator": "naive"}])
    plan = plan_study(scenario, days=[4], reps=2, workers=1)
    assert {row["label"] for row in plan.rows} == {"user"}


def test_plan_without_a_randomized_design_names_the_designs():
    scenario = make_scenario(users={"count": 400, "history_days": 7},
                             design=[{"kind": "opt_in", "estimator": "naive"}])
    with pytest.raises(ScenarioError, match="at least one randomized design"):
        plan_study(scenario, days=[4], reps=2, workers=1)


def test_the_answer_names_the_outcome_it_detects():
    # A revenue study's answer gives the detected effect in revenue, never in orders.
    from spillgauge.plan.answer import answer_plan

    row = {"label": "cluster-pools", "days": 7, "trusted": True, "recommendable": True,
           "power": 0.9, "power_se": 0.03, "gte": 12.5, "mde": 8.0, "mde_relative": 0.05,
           "rmse": 1.0, "chosen": True}
    text = answer_plan([row], power=0.8, horizon_days=28, unit="revenue per user")
    assert "(12.5 revenue per user over 7 days)" in text and "orders" not in text


def test_the_cuped_line_gives_the_reason_without_nested_brackets():
    # The trust rule's reason carries its own "(needs ...)"; the sentence around it adds none.
    from spillgauge.plan.answer import answer_cuped

    rows = [{"label": "user", "kind": "user", "is_user_level": True, "days": 7,
             "trusted": False, "recommendable": True,
             "why_not_trusted": "covers the GTE in 0.0% of replications (needs 90.0%)"}]
    text = answer_cuped(rows, [{"days": 7, "variance_factor": 0.36}], power=0.8, alpha=0.05)
    assert "keeps 36% of the user-level variance at 7 days" in text
    assert "not trusted in this scenario: it covers the GTE in 0.0% of replications " \
           "(needs 90.0%); adjustment" in text
    assert "))" not in text
