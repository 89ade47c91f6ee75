"""Property-based: any table thrown at the loader either loads or raises a ScenarioError."""

from __future__ import annotations

import dataclasses

from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from spillgauge.errors import ScenarioError
from spillgauge.scenario.reading import load_scenario, parse_scenario

SECTIONS = {
    "calendar": ["days", "tick_hours", "diurnal_amplitude", "daily_shock_sd",
                 "daily_shock_autocorrelation"],
    "users": ["count", "orders_per_week", "rate_shape", "history_days", "file"],
    "pools": ["count", "restock_every_hours", "lead_time_hours", "stock_cover", "demand_spread",
              "on_stockout", "substitute_share", "file"],
    "graph": ["model", "mean_degree", "within_pool_share", "community_count",
              "within_community_share", "rewire_share", "file"],
    "effect": ["lift", "peer_lift", "carryover_half_life_hours"],
    "study": ["reps", "seed", "alpha"],
}
DESIGN_KEYS = ["kind", "label", "share", "randomization", "adjust", "clusters", "resolution",
               "estimator", "exposure", "block_hours", "burn_in_hours", "per", "index"]
WORDS = ["user", "cluster", "switchback", "pools", "graph", "lost", "substitute", "none",
         "small_world", "pool_blocks", "communities", "edge_list", "complete", "bernoulli",
         "hajek", "horvitz_thompson", "neighbourhood", "market", "pool", "x", "", "a-b"]

scalars = st.one_of(
    st.integers(min_value=-10, max_value=100), st.integers(), st.floats(allow_nan=True),
    st.floats(min_value=-2, max_value=50), st.booleans(), st.sampled_from(WORDS), st.text(),
)
values = st.one_of(scalars, st.lists(scalars, max_size=3),
                   st.dictionaries(st.text(max_size=5), scalars, max_size=2))


@st.composite
def scenario_tables(draw):
    data = {}
    if draw(st.booleans()) or draw(st.booleans()):
        data["name"] = draw(st.one_of(st.sampled_from(["fuzz", "a.b", "x y"]), scalars))
    for section, keys in SECTIONS.items():
        if draw(st.booleans()):
            table = {}
            for key in draw(st.lists(st.sampled_from(keys + ["bogus"]), max_size=4)):
                table[key] = draw(values)
            data[section] = draw(st.one_of(st.just(table), values)) if draw(
                st.integers(0, 9)) == 0 else table
    if draw(st.booleans()):
        designs = []
        for _ in range(draw(st.integers(0, 3))):
            design = {k: draw(values) for k in draw(st.lists(st.sampled_from(DESIGN_KEYS),
                                                             max_size=5))}
            if draw(st.booleans()):
                design["kind"] = draw(st.sampled_from(["user", "cluster", "switchback", "x"]))
            designs.append(design)
        data["design"] = draw(st.one_of(st.just(designs), values)) if draw(
            st.integers(0, 9)) == 0 else designs
    if draw(st.integers(0, 5)) == 0:
        data[draw(st.text(max_size=6))] = draw(values)
    return data


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(scenario_tables())
@example({"name": "fuzz", "design": [{"kind": []}]})  # an unhashable kind once escaped
def test_loader_loads_or_names_a_field(data):
    try:
        scenario = parse_scenario(data)
    except ScenarioError as exc:
        assert isinstance(exc.field, str) and exc.field
        root = exc.field.split(".")[0].split("[")[0].split(":")[0]
        assert root in {*SECTIONS, "name", "description", "design", "scenario", '""'} or \
            exc.field in data
    else:
        assert dataclasses.is_dataclass(scenario)


@settings(max_examples=150, deadline=None)
@given(st.text(max_size=300))
def test_any_file_text_loads_or_names_a_field(tmp_path_factory, text):
    path = tmp_path_factory.mktemp("fuzz") / "s.toml"
    path.write_text(text, encoding="utf-8")
    try:
        load_scenario(path)
    except ScenarioError as exc:
        assert exc.field
