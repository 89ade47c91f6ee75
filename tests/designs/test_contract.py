"""Common checks over every design (STYLE.md section 8): shapes, determinism, rng type, share."""

from __future__ import annotations

import numpy as np
import pytest

from spillgauge.designs import (
    draw_cluster_schedule,
    draw_switchback_schedule,
    draw_user_schedule,
)

N_USERS, N_TICKS = 60, 48
LABELS = np.repeat(np.arange(12), 5)

DRAWS = {
    "user": lambda rng: draw_user_schedule(N_USERS, N_TICKS, share=0.4, rng=rng),
    "user-bernoulli": lambda rng: draw_user_schedule(N_USERS, N_TICKS, share=0.4,
                                                     randomization="bernoulli", rng=rng),
    "cluster": lambda rng: draw_cluster_schedule(LABELS, N_TICKS, share=0.5, rng=rng),
    "switchback-market": lambda rng: draw_switchback_schedule(
        np.zeros(N_USERS, dtype=int), N_TICKS, block_ticks=6, rng=rng),
    "switchback-pool": lambda rng: draw_switchback_schedule(LABELS, N_TICKS, block_ticks=12,
                                                            rng=rng),
}


@pytest.mark.parametrize("name", sorted(DRAWS))
def test_same_rng_same_schedule_and_shapes(name):
    a = DRAWS[name](np.random.default_rng(4))
    b = DRAWS[name](np.random.default_rng(4))
    np.testing.assert_array_equal(a.is_treated, b.is_treated)
    np.testing.assert_array_equal(a.unit_of_user, b.unit_of_user)
    assert a.n_users == N_USERS and a.n_ticks == N_TICKS
    assert a.is_treated.shape == (a.n_units, a.n_periods)
    assert a.unit_tick_treated().shape == (a.n_units, N_TICKS)


@pytest.mark.parametrize("name", sorted(DRAWS))
def test_a_seed_is_not_an_rng(name):
    with pytest.raises(TypeError, match="numpy.random.Generator"):
        DRAWS[name](42)


@pytest.mark.parametrize("name", sorted(DRAWS))
def test_treated_share_on_average(name):
    # The design's share is the expected treated share of units (binomial tolerance).
    shares = [DRAWS[name](np.random.default_rng(s)).is_treated.mean() for s in range(400)]
    target = 0.4 if name.startswith("user") else 0.5
    draws = DRAWS[name](np.random.default_rng(0)).is_treated.size
    assert abs(np.mean(shares) - target) < 4 * np.sqrt(target * (1 - target) / draws / 400)


def test_complete_randomization_is_exact():
    schedule = draw_user_schedule(N_USERS, N_TICKS, share=0.4, rng=np.random.default_rng(1))
    assert schedule.is_treated.sum() == 24
