"""One contract over every registered design kind (STYLE.md section 8; scikit-learn's common checks).

Each kind is drawn in a small real market and analysed in its own simulated
world: determinism, schedule shape, treated share, no shared or global random
state, the Estimate's fields, degenerate outcomes, and the declared keys.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from spillgauge.designs.registry import KINDS, kind_of, make_design_spec
from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.estimators.estimate import Estimate, InterferenceDiagnostic
from spillgauge.market.build import build_market
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule
from spillgauge.worlds.engine import simulate_worlds
from tests.conftest import make_scenario

# Every kind with its defaults, plus the variants that take other code paths.
VARIANTS = [{"kind": name} for name in KINDS] + [
    {"kind": "user", "randomization": "bernoulli", "share": 0.3},
    {"kind": "user", "adjust": True},
    {"kind": "user", "strata": "pools", "share": 0.3},
    {"kind": "user", "strata": "pre_period", "adjust": True, "pre_period_strata": 3},
    {"kind": "cluster", "clusters": "graph"},
    {"kind": "cluster", "clusters": "pools+graph", "estimator": "horvitz_thompson"},
    {"kind": "cluster", "exposure": "neighbourhood"},
    {"kind": "switchback", "per": "pool", "block_hours": 12, "burn_in_hours": 3},
    {"kind": "interference_test", "clusters": "graph"},
    {"kind": "rollout", "waves": 2},
    {"kind": "opt_in", "estimator": "naive", "selection_on": "rate"},
    {"kind": "opt_in", "estimator": "ipw", "selection": 0.0},
    {"kind": "opt_in", "estimator": "aipw", "take_up": 0.5, "selection": -1.0},
    {"kind": "regional_launch", "launch_day": 4, "pools": 3, "estimator": "did"},
    {"kind": "regional_launch", "launch_day": 3, "pools": 2, "choose": "random",
     "estimator": "pre_post"},
    {"kind": "regional_launch", "launch_day": 4, "pools": 3, "estimator": "synthetic_did"},
] + [{"kind": name, "inference": "randomization", "permutations": 19}
     for name, kind in KINDS.items() if any(k.name == "inference" for k in kind.keys)] + [
    {"kind": "cluster", "exposure": "neighbourhood", "inference": "randomization",
     "permutations": 19},
    {"kind": "switchback", "per": "pool", "block_hours": 12, "burn_in_hours": 3,
     "inference": "randomization", "permutations": 19},
    {"kind": "user", "strata": "pools", "inference": "randomization", "permutations": 19},
]


def _id(table: dict) -> str:
    return "-".join(str(v) for v in table.values())


@pytest.fixture(scope="module")
def market():
    scenario = make_scenario(
        users={"count": 240, "orders_per_week": 4.0, "history_days": 7},
        pools={"count": 12, "stock_cover": 1.2}, calendar={"days": 8},
        graph={"model": "pool_blocks", "mean_degree": 6},
        effect={"lift": 0.3, "peer_lift": 0.1},
        design=[{"kind": "user"}])
    return build_market(scenario, 3)


def _spec(table: dict):
    values = {k: v for k, v in table.items() if k != "kind"}
    return make_design_spec(table["kind"], values)


def test_every_kind_is_covered_by_the_variants():
    assert {t["kind"] for t in VARIANTS} == set(KINDS)


@pytest.mark.parametrize("table", VARIANTS, ids=_id)
def test_draw_is_deterministic_and_well_shaped(market, table):
    spec = _spec(table)
    kind = kind_of(spec)
    kind.prepare(market, spec)
    a = kind.draw(market, spec, rng=np.random.default_rng(5))
    b = kind.draw(market, spec, rng=np.random.default_rng(5))
    assert isinstance(a, AssignmentSchedule)
    np.testing.assert_array_equal(a.is_treated, b.is_treated)
    np.testing.assert_array_equal(a.unit_of_user, b.unit_of_user)
    np.testing.assert_array_equal(a.period_start_ticks, b.period_start_ticks)
    assert a.n_users == market.n_users and a.n_ticks == market.n_ticks
    assert a.is_treated.shape == (a.n_units, a.n_periods)


@pytest.mark.parametrize("table", VARIANTS, ids=_id)
def test_draw_takes_only_a_generator_and_touches_no_global_state(market, table):
    spec = _spec(table)
    kind = kind_of(spec)
    with pytest.raises(TypeError, match="numpy.random.Generator"):
        kind.draw(market, spec, rng=7)
    legacy = np.random.get_state()[1].copy()
    rng = np.random.default_rng(11)
    first = kind.draw(market, spec, rng=rng)
    # another draw from an independent generator in between changes nothing
    kind.draw(market, spec, rng=np.random.default_rng(99))
    again = kind.draw(market, spec, rng=np.random.default_rng(11))
    np.testing.assert_array_equal(first.is_treated, again.is_treated)
    np.testing.assert_array_equal(np.random.get_state()[1], legacy)


@pytest.mark.parametrize("table", VARIANTS, ids=_id)
def test_treated_share_matches_the_declared_probability(market, table):
    # The marginal treated probability a schedule reports is the mean share of treated
    # units x periods over draws (binomial tolerance, 4 SE; common practice, no source).
    spec = _spec(table)
    kind = kind_of(spec)
    draws = [kind.draw(market, spec, rng=np.random.default_rng(s)) for s in range(300)]
    shares = np.array([d.is_treated.mean() for d in draws])
    target = float(np.mean([d.treated_probability for d in draws]))
    cells = draws[0].is_treated.size
    tolerance = 4 * math.sqrt(target * (1 - target) / cells / len(draws)) + 1e-12
    assert abs(shares.mean() - target) <= tolerance


@pytest.mark.parametrize("table", VARIANTS, ids=_id)
def test_analysis_returns_a_full_estimate(market, table):
    spec = _spec(table)
    kind = kind_of(spec)
    schedule = kind.draw(market, spec, rng=np.random.default_rng(2))
    (panel,) = simulate_worlds(market, [schedule], rng=np.random.default_rng(8))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DegenerateEstimateWarning)
        estimate = kind.analyse(spec, panel, schedule, confidence=0.9,
                                tick_hours=market.tick_hours, rng=np.random.default_rng(5))
    assert isinstance(estimate, Estimate)
    assert estimate.method == kind.estimator_name(spec)
    for name in ("point", "standard_error", "ci_low", "ci_high"):
        assert isinstance(getattr(estimate, name), float), name
    assert estimate.ci_low <= estimate.point <= estimate.ci_high
    assert estimate.n_units > 0
    assert math.isfinite(estimate.standard_error)
    # A randomization p-value is one of 1/20, 2/20, ..., 20/20 with 19 re-draws (Fisher 1935:
    # (1 + #extreme) / (1 + R)), and only when the design asks for it.
    if spec.params.get("inference") == "randomization":
        assert round(estimate.randomization_p_value * 20, 9) in range(1, 21)
    else:
        assert math.isnan(estimate.randomization_p_value)
    # Only a randomized design that is not recommendable is a diagnostic (test of interference);
    # a launch may carry its balance or fit instead.
    is_test = isinstance(estimate.diagnostic, InterferenceDiagnostic)
    assert is_test == (kind.is_randomized and not kind.is_recommendable)
    assert estimate.diagnostic is None or is_test or not kind.is_randomized


@pytest.mark.parametrize("table", VARIANTS, ids=_id)
def test_no_orders_at_all_gives_zero_or_nan_never_an_exception(market, table):
    spec = _spec(table)
    kind = kind_of(spec)
    schedule = kind.draw(market, spec, rng=np.random.default_rng(2))
    (panel,) = simulate_worlds(market, [schedule], rng=np.random.default_rng(8))
    empty = OutcomePanel(
        fulfilled=np.zeros_like(panel.fulfilled), demanded=np.zeros_like(panel.demanded),
        pool_of_user=panel.pool_of_user, history=panel.history,
        pool_fulfilled=np.zeros_like(panel.pool_fulfilled),
        pool_demanded=np.zeros_like(panel.pool_demanded),
        pool_lost=np.zeros_like(panel.pool_lost), pool_stock=panel.pool_stock,
        tick_hours=panel.tick_hours)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DegenerateEstimateWarning)
        estimate = kind.analyse(spec, empty, schedule, confidence=0.95,
                                tick_hours=market.tick_hours, rng=np.random.default_rng(5))
    assert estimate.point == 0 or math.isnan(estimate.point)


@pytest.mark.parametrize("name", sorted(KINDS))
def test_declared_keys_validate_their_defaults_and_say_what_they_accept(name):
    kind = KINDS[name]
    assert kind.summary and kind.name == name
    for key in kind.keys:
        assert key.validate(key.default, f"design[0].{key.name}") == key.default
        assert key.doc and key.expected()
    spec = make_design_spec(name)
    assert spec.label == kind.default_label(spec)
    assert kind.describe_unit(spec)
    assert set(kind.shown_keys) <= {key.name for key in kind.keys}
