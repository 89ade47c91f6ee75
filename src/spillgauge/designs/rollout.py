"""Regional staggered rollout: pools switch on at random times and stay on."""

from __future__ import annotations

import numpy as np

from spillgauge.designs.kind import DesignKind, MarketView
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.keys import DesignKey, check
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["draw_rollout_schedule", "Rollout"]


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


class Rollout(DesignKind):
    """Pools switch on at random times in waves and stay on."""

    name = "rollout"
    summary = ("staggered rollout: pools switch on at random in waves after an all-control "
               "first period; one group never switches")
    keys = (
        DesignKey(name="waves", type=int, default=4, minimum=1, maximum=50,
                  doc="the horizon is split into waves + 1 periods, the first all control; "
                      "the pools are split at random into waves + 1 groups, group k switching "
                      "on at period k and staying on, one group never (needs at least "
                      "waves + 1 pools)"),
    )
    shown_keys = ("waves",)

    def check(self, spec: DesignSpec, scenario: Scenario) -> None:
        check(scenario.has_pools(spec.waves + 1), "pools.count",
              f">= waves + 1 = {spec.waves + 1} for a staggered rollout ({spec.at})",
              scenario.pools.count)
        n_ticks = scenario.calendar.n_ticks
        check(spec.waves + 1 <= n_ticks, f"{spec.at}.waves",
              f"at most n_ticks - 1 = {n_ticks - 1}", spec.waves)

    def default_label(self, spec: DesignSpec) -> str:
        return f"rollout-{spec.waves}-waves"

    def describe_unit(self, spec: DesignSpec) -> str:
        return f"pool, staggered rollout in {spec.waves} waves"

    def estimator_name(self, spec: DesignSpec) -> str:
        return "difference_in_differences"

    def draw(self, market: MarketView, spec: DesignSpec, *, rng: np.random.Generator
             ) -> AssignmentSchedule:
        return draw_rollout_schedule(market.pool_of_user, market.n_ticks, waves=spec.waves,
                                     rng=rng)
