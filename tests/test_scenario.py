"""Scenario files: every bad value is refused with the dotted key named."""

from __future__ import annotations

import dataclasses

import pytest

from spillgauge.bundled import bundled_scenarios, find_scenario
from spillgauge.errors import ScenarioError
from spillgauge.scenario.reading import (
    load_scenario,
    parse_scenario,
    scenario_to_dict,
)


def _parse(**sections):
    return parse_scenario({"name": "t", **sections})


@pytest.mark.parametrize("sections, field", [
    ({"pools": {"cont": 3}}, r"pools\.cont"),
    ({"pools": {"count": -2}}, r"pools\.count"),
    ({"pools": {"restock_every_hours": 0}}, r"pools\.restock_every_hours"),
    ({"pools": {"restock_every_hours": 12, "lead_time_hours": 30}}, r"pools\.lead_time_hours"),
    ({"pools": {"stock_cover": -1.0}}, r"pools\.stock_cover"),
    ({"pools": {"stock_cover": "lots"}}, r"pools\.stock_cover"),
    ({"pools": {"on_stockout": "backorder"}}, r"pools\.on_stockout"),
    ({"pools": {"substitute_share": 0.5}}, r"pools\.substitute_share"),
    ({"pools": {"file": "no/such/pools.csv"}}, r"pools\.file"),
    ({"calendar": {"days": 0}}, r"calendar\.days"),
    ({"calendar": {"tick_hours": 5}}, r"calendar\.tick_hours"),
    ({"calendar": {"diurnal_amplitude": 1.5}}, r"calendar\.diurnal_amplitude"),
    ({"calendar": {"tick_hours": 4}, "pools": {"restock_every_hours": 6}},
     r"pools\.restock_every_hours"),
    ({"users": {"count": 0}}, r"users\.count"),
    ({"users": {"count": True}}, r"users\.count"),
    ({"users": {"orders_per_week": 0}}, r"users\.orders_per_week"),
    ({"users": {"rate_shape": -1}}, r"users\.rate_shape"),
    ({"graph": {"model": "scale_free"}}, r"graph\.model"),
    ({"graph": {"model": "edge_list"}}, r"graph\.file"),
    ({"graph": {"mean_degree": -3}}, r"graph\.mean_degree"),
    ({"effect": {"lift": -1.0}}, r"effect\.lift"),
    ({"effect": {"carryover_half_life_hours": -2}}, r"effect\.carryover_half_life_hours"),
    ({"study": {"alpha": 1.0}}, r"study\.alpha"),
    ({"study": {"reps": 0}}, r"study\.reps"),
    ({"design": [{"kind": "staggered"}]}, r"design\[0\]\.kind"),
    ({"design": [{"share": 0.5}]}, r"design\[0\]\.kind"),
    ({"design": [{"kind": "user", "block_hours": 3}]}, r"design\[0\]\.block_hours"),
    ({"design": [{"kind": "switchback", "block_hours": 12, "burn_in_hours": 12}]},
     r"design\[0\]\.burn_in_hours"),
    ({"design": [{"kind": "user"}, {"kind": "user"}]}, r"design\[1\]\.label"),
    ({"design": [{"kind": "cluster", "clusters": "graph"}]}, r"design\[0\]\.clusters"),
    ({"design": [{"kind": "user", "share": 1.0}]}, r"design\[0\]\.share"),
    ({"wrong_section": {}}, r"wrong_section"),
    ({"design": [{"kind": "rollout", "waves": 0}]}, r"design\[0\]\.waves"),
    ({"pools": {"count": 3}, "design": [{"kind": "rollout", "waves": 4}]}, r"pools\.count"),
    ({"design": [{"kind": "rollout", "block_hours": 24}]}, r"design\[0\]\.block_hours"),
    ({"pools": {"count": 3}, "design": [{"kind": "interference_test"}]}, r"pools\.count"),
])
def test_bad_values_name_the_field(sections, field):
    with pytest.raises(ScenarioError, match=field) as info:
        _parse(**sections)
    assert info.value.field.startswith(field.replace("\\", "").split("[")[0])


def test_message_names_field_expectation_and_value():
    with pytest.raises(ScenarioError) as info:
        _parse(pools={"restock_every_hours": 12, "lead_time_hours": 30})
    assert str(info.value) == ("pools.lead_time_hours must be in [0, restock_every_hours=12); "
                               "got 30")


def test_missing_file_and_bad_toml(tmp_path):
    with pytest.raises(ScenarioError, match="scenario must be an existing file"):
        load_scenario(tmp_path / "absent.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("name = 'x'\n[pools\ncount = 3\n")
    with pytest.raises(ScenarioError, match="valid TOML"):
        load_scenario(bad)


def test_missing_csv_column_is_named(tmp_path):
    from spillgauge.market.build import build_market

    users = tmp_path / "users.csv"
    users.write_text("user_id,pool_id\nu1,p1\n")
    scenario = parse_scenario({"name": "t", "users": {"file": str(users)}}, base_dir=tmp_path)
    with pytest.raises(ScenarioError, match=r"users\.file:orders_per_week"):
        build_market(scenario, 0)


def test_negative_rate_in_csv_is_named(tmp_path):
    from spillgauge.market.build import build_market

    users = tmp_path / "users.csv"
    users.write_text("user_id,pool_id,orders_per_week\nu1,p1,-3\n")
    scenario = parse_scenario({"name": "t", "users": {"file": str(users)}}, base_dir=tmp_path)
    with pytest.raises(ScenarioError, match=r"users\.file:orders_per_week \(line 2, user_id .u1.\) must be a number in"):
        build_market(scenario, 0)


def test_replace_revalidates():
    scenario = _parse()
    with pytest.raises(ScenarioError, match=r"pools\.count"):
        dataclasses.replace(scenario.pools, count=0)


def test_every_bundled_scenario_loads_and_round_trips():
    paths = bundled_scenarios()
    assert len(paths) >= 4
    for path in paths:
        scenario = load_scenario(path)
        again = parse_scenario(scenario_to_dict(scenario))
        assert dataclasses.replace(again, source=scenario.source) == scenario
        assert find_scenario(scenario.name) == path


def test_relative_files_resolve_against_the_scenario(tmp_path):
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "users.csv").write_text("user_id,pool_id,orders_per_week\nu1,p1,2\n")
    path = tmp_path / "s.toml"
    path.write_text('name = "s"\n[users]\nfile = "data/users.csv"\n')
    assert load_scenario(path).users.file == str(tmp_path / "data" / "users.csv")


def test_scenario_error_survives_pickling():
    # Errors raised in worker processes cross a process boundary by pickle.
    import pickle

    err = pickle.loads(pickle.dumps(ScenarioError("pools.count", "an int >= 1", -3)))
    assert (err.field, str(err)) == ("pools.count", "pools.count must be an int >= 1; got -3")


def test_interference_test_refuses_six_pools_naming_the_minimum():
    with pytest.raises(ScenarioError, match=r"pools\.count must be >= 7 for a test of "
                       r"interference .*2 pools per arm\); got 6"):
        _parse(pools={"count": 6}, design=[{"kind": "interference_test"}])


def test_interference_test_needs_seven_clusters():
    from spillgauge.study.run import run_study

    scenario = _parse(users={"count": 12}, pools={"count": 2}, calendar={"days": 2},
                      graph={"model": "communities", "community_count": 2, "mean_degree": 4,
                             "within_community_share": 1.0},
                      design=[{"kind": "interference_test", "clusters": "graph"}],
                      study={"reps": 1})
    with pytest.raises(ScenarioError, match=r"design\[0\]\.clusters must be a cluster source"):
        run_study(scenario)


def test_schedules_and_panels_leave_the_callers_arrays_writable():
    # Constructing the frozen containers must not freeze the arrays the caller still owns.
    import numpy as np

    from spillgauge.panel import OutcomePanel
    from spillgauge.schedule import AssignmentSchedule

    units = np.arange(4)
    treated = np.array([[True], [False], [True], [False]])
    schedule = AssignmentSchedule(unit_of_user=units, is_treated=treated,
                                  period_start_ticks=np.zeros(1, dtype=np.int64), n_ticks=2)
    assert units.flags.writeable and treated.flags.writeable
    assert not schedule.unit_of_user.flags.writeable
    fulfilled = np.ones((4, 2), dtype=np.int64)
    panel = OutcomePanel.from_arrays(fulfilled=fulfilled)
    assert fulfilled.flags.writeable and not panel.fulfilled.flags.writeable
