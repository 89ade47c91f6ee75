"""simulate -> files -> analyze gives the study's own estimate for that replication, bit for bit."""

from __future__ import annotations

import numpy as np
import pytest

from spillgauge import analyze_experiment, assign_design, simulate_experiment
from spillgauge.designs.registry import KINDS, kind_of
from spillgauge.experiment.analyze import analysis_text
from spillgauge.experiment.folder import read_assignment, write_assignment
from spillgauge.experiment.simulate import write_experiment
from spillgauge.market.build import build_market
from spillgauge.seeding import ASSIGNMENT, design_key, stream
from spillgauge.study.replication import run_replication
from tests.experiment.conftest import DESIGNS, same_estimate

SEED = 23


@pytest.fixture(scope="module")
def replication(scenario):
    return run_replication(scenario, SEED, 0)


def test_every_registered_kind_is_covered(scenario):
    # Launches (opt-in, regional launch) are not assigned: assign_design refuses them.
    assert {d.kind for d in scenario.designs} == {k for k, v in KINDS.items()
                                                  if v.is_randomized}


def test_a_launch_is_not_assigned(scenario):
    from spillgauge.designs.registry import make_design_spec
    from spillgauge.errors import ScenarioError

    with pytest.raises(ScenarioError, match=r"--design.*randomized design"):
        assign_design(scenario, make_design_spec("opt_in", selection_on="rate"), seed=SEED)


@pytest.mark.parametrize("index", range(len(DESIGNS)))
def test_simulate_then_analyze_equals_the_study_replication(scenario, replication, tmp_path,
                                                            index):
    # The study's code (run_replication: every design's world at once) is the reference.
    spec = scenario.designs[index]
    experiment = simulate_experiment(scenario, spec.label, seed=SEED, start="2027-03-01")
    write_experiment(experiment, tmp_path)
    analysis = analyze_experiment(tmp_path)
    expected = replication.runs[spec.label].estimate
    assert same_estimate(analysis.estimate, expected), (analysis.estimate, expected)
    assert analysis.note == replication.runs[spec.label].note
    assert experiment.truth == replication.truth


def test_analyze_reads_user_rows_with_hours_for_a_switchback(scenario, replication, tmp_path):
    # A team may export user rows by hour instead of pool rows: same panel, same estimate.
    spec = scenario.design("switchback-24h-burn6h-per-pool")
    experiment = simulate_experiment(scenario, spec.label, seed=SEED, start="2027-03-01")
    write_experiment(experiment, tmp_path)
    import pandas as pd

    pools = pd.read_csv(tmp_path / "pool_orders.csv", dtype={"pool_id": str})
    users = pd.read_csv(tmp_path / "assignment.csv", dtype={"user_id": str, "pool_id": str})
    first_user = users.groupby("pool_id")["user_id"].first()
    pools["user_id"] = pools["pool_id"].map(first_user)
    pools = pools.dropna(subset=["user_id"])
    pools[["user_id", "date", "hour", "orders"]].to_csv(tmp_path / "by_user.csv", index=False)
    analysis = analyze_experiment(tmp_path, orders=tmp_path / "by_user.csv")
    assert same_estimate(analysis.estimate, replication.runs[spec.label].estimate)


@pytest.mark.parametrize("index", range(len(DESIGNS)))
def test_assignment_is_the_kinds_own_draw_and_reads_back_identical(scenario, tmp_path, index):
    spec = scenario.designs[index]
    market = build_market(scenario, SEED)
    kind = kind_of(spec)
    kind.prepare(market, spec)
    drawn = kind.draw(market, spec, rng=np.random.default_rng(
        stream(SEED, 0, ASSIGNMENT, design_key(spec.label))))
    assignment = assign_design(scenario, spec.label, seed=SEED, start="2027-03-01")
    write_assignment(assignment, tmp_path)
    back = read_assignment(tmp_path)
    for schedule in (assignment.schedule, back.schedule):
        for name in ("unit_of_user", "is_treated", "period_start_ticks"):
            assert np.array_equal(getattr(schedule, name), getattr(drawn, name)), name
        assert (schedule.unit_kind, schedule.randomization, schedule.n_ticks) == \
            (drawn.unit_kind, drawn.randomization, drawn.n_ticks)
        assert schedule.treated_probability == drawn.treated_probability
        for name in ("cluster_of_user", "is_cluster_arm", "stratum_of_unit"):
            assert (getattr(drawn, name) is None) == (getattr(schedule, name) is None)
            if getattr(drawn, name) is not None:
                assert np.array_equal(getattr(drawn, name), getattr(schedule, name))
        if drawn.exposure_units is not None:
            assert (schedule.exposure_units != drawn.exposure_units).nnz == 0
    assert np.array_equal(back.history, assignment.history)
    assert np.array_equal(back.pool_of_user, assignment.pool_of_user)
    assert (back.spec.kind, back.spec.label, back.spec.values) == \
        (assignment.spec.kind, assignment.spec.label, assignment.spec.values)


def test_same_seed_same_files_other_seed_other_assignment(scenario, tmp_path):
    label = "cluster-pools"
    for name, seed in (("a", 5), ("b", 5), ("c", 6)):
        write_assignment(assign_design(scenario, label, seed=seed, start="2027-03-01"),
                         tmp_path / name)
    for file in ("assignment.csv", "calendar.csv", "assignment.json"):
        assert (tmp_path / "a" / file).read_bytes() == (tmp_path / "b" / file).read_bytes()
    assert (tmp_path / "a" / "calendar.csv").read_bytes() != \
        (tmp_path / "c" / "calendar.csv").read_bytes()


def test_ids_come_from_the_users_file(tmp_path):
    from pathlib import Path

    from spillgauge.scenario.reading import load_scenario

    example = Path(__file__).parents[2] / "docs" / "calibration"
    scenario = load_scenario(example / "calibrated.toml")
    assignment = assign_design(scenario, "cluster-pools", seed=1, start="2027-03-01")
    write_assignment(assignment, tmp_path)
    import pandas as pd

    users = pd.read_csv(example / "users.csv", dtype=str)
    written = pd.read_csv(tmp_path / "assignment.csv", dtype=str)
    assert sorted(written["user_id"]) == sorted(users["user_id"])
    home = dict(zip(users["user_id"], users["pool_id"]))
    assert all(home[u] == p for u, p in zip(written["user_id"], written["pool_id"]))
    history = dict(zip(users["user_id"], users["history_orders"].astype(int)))
    assert all(history[u] == int(h) for u, h in zip(written["user_id"],
                                                     written["pre_period_orders"]))
    # a pool's users share one arm (the unit is the pool, named by its id)
    assert (written["unit"] == written["pool_id"]).all()
    assert written.groupby("pool_id")["arm"].nunique().max() == 1


def test_a_rollout_names_each_users_switch_on_time(scenario, tmp_path):
    import pandas as pd

    assignment = assign_design(scenario, "rollout-2-waves", seed=SEED, start="2027-03-01")
    write_assignment(assignment, tmp_path)
    users = pd.read_csv(tmp_path / "assignment.csv", dtype=str)
    calendar = pd.read_csv(tmp_path / "calendar.csv", dtype=str)
    first = calendar[calendar["arm"] == "treatment"].groupby("unit")["start"].min()
    expected = users["unit"].map(first).fillna("never")
    assert (users["switch_on"] == expected).all()
    # 2 waves on 6 days of 2-hour ticks: periods start at ticks 0, 24 and 48 (days 0, 2, 4)
    assert set(users["switch_on"]) == {"2027-03-03T00:00", "2027-03-05T00:00", "never"}


@pytest.mark.parametrize("design", [
    {"kind": "cluster", "clusters": "pools", "label": "cluster-fisher"},
    {"kind": "switchback", "block_hours": 24, "burn_in_hours": 6, "per": "pool",
     "label": "switchback-fisher"},
    {"kind": "user", "strata": "pools", "label": "user-strata-fisher"},
    {"kind": "switchback", "block_hours": 24, "burn_in_hours": 12,
     "randomization_statistic": "studentized", "label": "switchback-fisher-t"}])
def test_analyze_gives_the_studys_randomization_p_value(design, tmp_path):
    # The randomization test's re-draws come from replication 0's own stream of the seed,
    # so analyze repeats the study's p-value bit for bit (same_estimate compares every field).
    from tests.experiment.conftest import small_market

    scenario = small_market(design=[{**design, "inference": "randomization",
                                     "permutations": 39}])
    label = design["label"]
    expected = run_replication(scenario, SEED, 0).runs[label].estimate
    assert np.isfinite(expected.randomization_p_value)
    write_experiment(simulate_experiment(scenario, label, seed=SEED, start="2027-03-01"),
                     tmp_path)
    analysis = analyze_experiment(tmp_path)
    assert same_estimate(analysis.estimate, expected)
    lines = analysis_text(analysis).splitlines()
    first = next(i for i, x in enumerate(lines) if "randomization p-value" in x)
    rest = [x for x in lines[first + 1:first + 3] if x.startswith("    ")]  # wrapped on
    line = " ".join(x.strip() for x in [lines[first], *rest])
    assert line.endswith("39 re-draws of this design's assignment"
                         + (", studentized)" if "randomization_statistic" in design else ")"))


def _outcome_market(outcome):
    # Revenue with lognormal basket values whose products are not exact in binary, so the
    # bit-for-bit check also holds the order in which a user's days are added.
    from tests.experiment.conftest import small_market

    users = {"count": 600, "orders_per_week": 4.0, "history_days": 14}
    if outcome == "revenue":
        users.update(basket_value_mean=23.7, basket_value_sd=11.3)
    return small_market(users=users, study={"reps": 4, "seed": 11, "outcome": outcome})


@pytest.fixture(scope="module", params=["conversion", "revenue"])
def outcome_case(request):
    scenario = _outcome_market(request.param)
    return scenario, run_replication(scenario, SEED, 0)


@pytest.mark.parametrize("index", range(len(DESIGNS)))
def test_other_outcomes_round_trip_bit_for_bit(outcome_case, tmp_path, index):
    # The study's code (run_replication) is the reference, as for orders: every design's
    # estimate of conversion or revenue from simulate's files equals the replication's.
    scenario, replication = outcome_case
    spec = scenario.designs[index]
    experiment = simulate_experiment(scenario, spec.label, seed=SEED, start="2027-03-01")
    write_experiment(experiment, tmp_path)
    analysis = analyze_experiment(tmp_path)
    assert analysis.assignment.outcome == scenario.study.outcome
    expected = replication.runs[spec.label].estimate
    assert same_estimate(analysis.estimate, expected), (analysis.estimate, expected)
    assert experiment.truth == replication.truth
