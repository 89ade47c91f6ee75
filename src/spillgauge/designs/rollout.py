"""Regional staggered rollout: pools switch on at random times and stay on."""

from __future__ import annotations

import warnings

import numpy as np

from spillgauge.designs.kind import DesignKind, MarketView, inference_keys
from spillgauge.errors import PeriodWeightWarning
from spillgauge.estimators.rollout import two_way_fixed_effects_period_weights
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.keys import DesignKey, check
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["Rollout", "draw_rollout_schedule", "warn_period_weights"]


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


def warn_period_weights(spec: DesignSpec, n_pools: int, n_ticks: int) -> None:
    """Warn with :class:`PeriodWeightWarning` when TWFE weighs the rollout's periods unlike the GTE.

    The weights are those of a rollout of ``n_pools`` equal pools in ``spec.waves`` waves
    (Goodman-Bacon 2021); the GTE weighs each period by its share of the horizon.
    """
    starts = np.floor(np.arange(spec.waves + 1) * n_ticks / (spec.waves + 1)).astype(int)
    lengths = np.diff(np.append(starts, n_ticks))
    group = np.arange(n_pools) * (spec.waves + 1) // n_pools
    adoption = np.where(group == 0, spec.waves + 1, group)
    is_treated = np.arange(spec.waves + 1)[None, :] >= adoption[:, None]
    weights = two_way_fixed_effects_period_weights(is_treated, np.ones(n_pools), lengths)
    gte = lengths / n_ticks
    if np.max(np.abs(weights - gte)) > 0.01:
        warnings.warn(f"{spec.at}: two_way_fixed_effects weighs the rollout's periods "
                      + ", ".join(f"{w:.2f}" for w in weights) + " where the GTE weighs them "
                      + ", ".join(f"{w:.2f}" for w in gte) + "; when the effect per hour "
                      "moves with the calendar its estimate is biased (Goodman-Bacon 2021); "
                      "estimator = \"staggered\" weighs them as the GTE does",
                      PeriodWeightWarning, stacklevel=2)


class Rollout(DesignKind):
    """Pools switch on at random times in waves and stay on."""

    name = "rollout"
    compares_periods = True
    summary = ("staggered rollout: pools switch on at random in waves after an all-control "
               "first period; one group never switches")
    keys = (
        DesignKey(name="waves", type=int, default=4, minimum=1, maximum=50,
                  doc="the horizon is split into waves + 1 periods, the first all control; "
                      "the pools are split at random into waves + 1 groups, group k switching "
                      "on at period k and staying on, one group never (needs at least "
                      "waves + 1 pools)"),
        DesignKey(name="estimator", type=str, default="staggered",
                  choices=("staggered", "two_way_fixed_effects"),
                  doc="`\"staggered\"`: each period's switched-on pools against the "
                      "not-yet-switched ones, every hour weighted alike as the GTE does "
                      "(Callaway & Sant'Anna 2021); `\"two_way_fixed_effects\"`: the TWFE "
                      "regression, whose period weights differ from the GTE's "
                      "(Goodman-Bacon 2021; a warning says by how much)"),
        *inference_keys(),
    )
    shown_keys = ("waves",)

    def check(self, spec: DesignSpec, scenario: Scenario) -> None:
        check(scenario.has_pools(spec.waves + 1), "pools.count",
              f">= waves + 1 = {spec.waves + 1} for a staggered rollout ({spec.at})",
              scenario.pools.count)
        n_ticks = scenario.calendar.n_ticks
        check(spec.waves + 1 <= n_ticks, f"{spec.at}.waves",
              f"at most n_ticks - 1 = {n_ticks - 1}", spec.waves)
        if spec.estimator == "two_way_fixed_effects":
            warn_period_weights(spec, scenario.pools.count if scenario.pools.file is None
                                and scenario.users.file is None else spec.waves + 1, n_ticks)

    def default_label(self, spec: DesignSpec) -> str:
        label = f"rollout-{spec.waves}-waves"
        if spec.estimator == "two_way_fixed_effects":
            label += "-twfe"
        return label

    def describe_unit(self, spec: DesignSpec) -> str:
        return f"pool, staggered rollout in {spec.waves} waves"

    def estimator_name(self, spec: DesignSpec) -> str:
        if spec.estimator == "two_way_fixed_effects":
            return "difference_in_differences"
        return "staggered_difference_in_differences"

    def draw(self, market: MarketView, spec: DesignSpec, *, rng: np.random.Generator
             ) -> AssignmentSchedule:
        return draw_rollout_schedule(market.pool_of_user, market.n_ticks, waves=spec.waves,
                                     rng=rng)
