"""Regional staggered rollout: pools switch on at random times and stay on."""

from __future__ import annotations

import numpy as np

from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["draw_rollout_schedule"]


def draw_rollout_schedule(pool_of_user: np.ndarray, n_ticks: int, *, waves: int,
                          rng: np.random.Generator) -> AssignmentSchedule:
    """Draw a staggered rollout over pools.

    The horizon is split into ``waves + 1`` periods of (nearly) equal length.
    Period 0 is all control. The pools are put in random order and split into
    ``waves + 1`` groups of (nearly) equal size: group ``k`` (``k = 1..waves``)
    switches on at the start of period ``k`` and stays on; group 0 never switches
    (the not-yet- and never-treated pools are the comparison). With equal groups
    the treated share then rises linearly in time, the shape of the near-optimal
    designs of Xiong, Athey, Bayati & Imbens (2024).

    Parameters
    ----------
    pool_of_user : ndarray of int, shape (n_users,)
    n_ticks : int
    waves : int
        Number of switch-on times, >= 1; needs at least ``waves + 1`` pools.
    rng : numpy.random.Generator

    Examples
    --------
    >>> s = draw_rollout_schedule(np.arange(6), 60, waves=2, rng=np.random.default_rng(0))
    >>> s.period_start_ticks.tolist(), s.is_treated.sum(axis=0).tolist()
    ([0, 20, 40], [0, 2, 4])
    """
    check_rng(rng)
    pool_of_user = np.asarray(pool_of_user, dtype=np.int64)
    n_pools = int(pool_of_user.max()) + 1 if pool_of_user.size else 0
    if waves < 1 or n_pools < waves + 1:
        raise ValueError(f"a rollout in {waves} waves needs at least {waves + 1} pools; "
                         f"got {n_pools}")
    if n_ticks < waves + 1:
        raise ValueError(f"a rollout in {waves} waves needs at least {waves + 1} ticks")
    starts = np.floor(np.arange(waves + 1) * n_ticks / (waves + 1)).astype(np.int64)
    group = np.empty(n_pools, dtype=np.int64)
    group[rng.permutation(n_pools)] = np.arange(n_pools) * (waves + 1) // n_pools
    # group 0 never switches; group k switches on at period k
    adoption = np.where(group == 0, waves + 1, group)
    is_treated = np.arange(waves + 1)[None, :] >= adoption[:, None]
    return AssignmentSchedule(unit_of_user=pool_of_user, is_treated=is_treated,
                              period_start_ticks=starts, n_ticks=n_ticks,
                              treated_probability=float(is_treated.mean()), unit_kind="pool",
                              randomization="complete")
