"""A small market holding every design kind, for the experiment's tests."""

from __future__ import annotations

import math

import pytest

from tests.conftest import make_scenario

DESIGNS = [
    {"kind": "user"},
    {"kind": "user", "adjust": True, "randomization": "bernoulli"},
    {"kind": "cluster", "clusters": "pools"},
    {"kind": "cluster", "clusters": "pools", "estimator": "horvitz_thompson"},
    {"kind": "cluster", "clusters": "graph", "exposure": "neighbourhood"},
    {"kind": "switchback", "block_hours": 24, "burn_in_hours": 6, "per": "pool"},
    {"kind": "switchback", "block_hours": 12},
    {"kind": "interference_test", "clusters": "pools"},
    {"kind": "rollout", "waves": 2},
    {"kind": "switchback_minimax", "per": "pool"},
    {"kind": "user", "strata": "pools"},
    {"kind": "user", "strata": "pre_period", "adjust": True},
]


def small_market(**more):
    """Return a scenario of 600 users in 8 pools over 6 days with a graph and every kind."""
    sections = dict(
        name="small_market",
        calendar={"days": 6, "tick_hours": 2, "diurnal_amplitude": 0.4},
        users={"count": 600, "orders_per_week": 4.0, "history_days": 14},
        pools={"count": 8, "stock_cover": 1.1},
        graph={"model": "pool_blocks", "mean_degree": 4},
        effect={"lift": 0.3, "peer_lift": 0.2, "carryover_half_life_hours": 4},
        study={"reps": 4, "seed": 11},
        design=DESIGNS,
    )
    sections.update(more)
    return make_scenario(**sections)


@pytest.fixture(scope="session")
def scenario():
    return small_market()


def same_estimate(a, b) -> bool:
    """Whether two Estimates hold the same values, field by field (NaN equals NaN)."""
    for name in a.__slots__:
        x, y = getattr(a, name), getattr(b, name)
        if isinstance(x, float) and isinstance(y, float) and math.isnan(x) and math.isnan(y):
            continue
        if name == "diagnostic" and x is not None and y is not None:
            if not same_estimate(x, y):
                return False
            continue
        if x != y:
            return False
    return True
