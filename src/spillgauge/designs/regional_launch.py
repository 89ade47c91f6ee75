"""Regional launch: a few pools switch on at one time, chosen (not at random), and stay on.

Not a randomized design: the launched pools are the largest, the smallest or a
random few, and the launch date is fixed. Its estimand is the effect on the
launched pools over the post-launch days, whose truth comes from the launch's own
world against the all-control world on the same random numbers.
"""

from __future__ import annotations

import numpy as np

from spillgauge.designs.kind import DesignKind, MarketView
from spillgauge.panel import OutcomePanel
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.keys import DesignKey, check
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["draw_regional_launch_schedule", "RegionalLaunch", "LAUNCH_CHOICES",
           "LAUNCH_ESTIMATORS"]

LAUNCH_CHOICES = ("largest", "smallest", "random")
LAUNCH_ESTIMATORS = {"pre_post": "pre_post_difference",
                     "did": "launch_difference_in_differences",
                     "synthetic_control": "synthetic_control",
                     "synthetic_did": "synthetic_difference_in_differences"}


def draw_regional_launch_schedule(pool_of_user: np.ndarray, expected_demand: np.ndarray,
                                  n_ticks: int, *, pools: int, choose: str, launch_tick: int,
                                  rng: np.random.Generator) -> AssignmentSchedule:
    """Return the launch: ``pools`` pools chosen by ``choose`` switch on at ``launch_tick``.

    ``"largest"`` / ``"smallest"`` rank pools by ``expected_demand`` (ties by
    index; nothing is drawn); ``"random"`` draws them without replacement.

    >>> s = draw_regional_launch_schedule(np.array([0, 1, 1, 2]), np.array([1.0, 5.0, 2.0]),
    ...                                   48, pools=1, choose="largest", launch_tick=24,
    ...                                   rng=np.random.default_rng(0))
    >>> s.is_treated.tolist(), s.period_start_ticks.tolist()
    ([[False, False], [False, True], [False, False]], [0, 24])
    """
    check_rng(rng)
    n_pools = int(np.asarray(expected_demand).size)
    if choose == "random":
        chosen = rng.choice(n_pools, size=pools, replace=False)
    else:
        order = np.argsort(-np.asarray(expected_demand) if choose == "largest"
                           else np.asarray(expected_demand), kind="stable")
        chosen = order[:pools]
    is_treated = np.zeros((n_pools, 2), dtype=bool)
    is_treated[chosen, 1] = True
    return AssignmentSchedule(unit_of_user=pool_of_user, is_treated=is_treated,
                              period_start_ticks=np.array([0, launch_tick]), n_ticks=n_ticks,
                              treated_probability=float(is_treated.mean()), unit_kind="pool",
                              randomization="complete")


class RegionalLaunch(DesignKind):
    """Chosen pools launch at one date; pre/post, DiD, synthetic control or synthetic DiD."""

    name = "regional_launch"
    summary = ("some pools launch first, chosen (not at random), and stay on; judged against "
               "the effect on the launched pools after the launch")
    keys = (
        DesignKey(name="pools", type=int, default=5, minimum=1, maximum=10_000,
                  doc="how many pools launch (at least 3 others must stay off; synthetic "
                      "control and synthetic DiD need `pools.count >= 2 x pools + 2`)"),
        DesignKey(name="choose", type=str, default="largest", choices=LAUNCH_CHOICES,
                  doc="which pools: `\"largest\"`, `\"smallest\"` (by expected demand) or "
                      "`\"random\"`"),
        DesignKey(name="launch_day", type=int, default=7, minimum=1, maximum=10_000,
                  doc="whole days before the launch form the pre-period; the launch stays on "
                      "(must be < calendar.days)"),
        DesignKey(name="estimator", type=str, default="synthetic_control",
                  choices=tuple(LAUNCH_ESTIMATORS),
                  doc="`\"pre_post\"` (launched pools after vs before), `\"did\"` (difference "
                      "in differences against the other pools), `\"synthetic_control\"` or "
                      "`\"synthetic_did\"` (synthetic difference in differences)"),
        DesignKey(name="variance", type=str, default="placebo", choices=("placebo", "jackknife"),
                  doc="synthetic DiD's variance: `\"placebo\"` (placebo launches among the "
                      "other pools) or `\"jackknife\"` (leave one pool out, weights fixed; "
                      "needs `pools >= 2`)"),
    )
    shown_keys = ("pools", "choose", "launch_day", "estimator")
    estimand = "launched_pools"
    needs_user_days = True  # the truth sums each user's orders over the post-launch days
    question = "the effect on the launched pools after the launch"
    is_recommendable = False
    is_randomized = False

    def check(self, spec: DesignSpec, scenario: Scenario) -> None:
        check(scenario.has_pools(spec.pools + 3), "pools.count",
              f">= {spec.at}.pools + 3 = {spec.pools + 3} (three pools stay off as the "
              "comparison)", scenario.pools.count)
        check(spec.launch_day < scenario.calendar.days, f"{spec.at}.launch_day",
              f"< calendar.days = {scenario.calendar.days}", spec.launch_day)
        if spec.estimator in ("synthetic_control", "synthetic_did"):
            check(scenario.has_pools(2 * spec.pools + 2), "pools.count",
                  f">= 2 x {spec.at}.pools + 2 = {2 * spec.pools + 2} for estimator = "
                  f"{spec.estimator!r} (placebo launches of as many pools among the others, "
                  "with two donors left)", scenario.pools.count)
        if spec.variance != "placebo":
            check(spec.estimator == "synthetic_did", f"{spec.at}.variance",
                  f"'placebo' unless estimator = 'synthetic_did' (got estimator = "
                  f"{spec.estimator!r})", spec.variance)
            check(spec.pools >= 2, f"{spec.at}.pools",
                  ">= 2 for variance = 'jackknife' (leave one launched pool out)", spec.pools)
        if spec.estimator == "pre_post" or spec.estimator == "did":
            check(spec.pools >= 2, f"{spec.at}.pools",
                  f">= 2 for estimator = {spec.estimator!r} (pools are the clusters)",
                  spec.pools)

    def default_label(self, spec: DesignSpec) -> str:
        return f"launch-{spec.choose}-{spec.pools}-{spec.estimator.replace('_', '-')}"

    def describe_unit(self, spec: DesignSpec) -> str:
        return f"{spec.pools} {spec.choose} pools from day {spec.launch_day} (not randomized)"

    def estimator_name(self, spec: DesignSpec) -> str:
        return LAUNCH_ESTIMATORS[spec.estimator]

    def draw(self, market: MarketView, spec: DesignSpec, *, rng: np.random.Generator
             ) -> AssignmentSchedule:
        n_pools = int(market.pool_of_user.max()) + 1
        demand = np.bincount(market.pool_of_user, weights=market.rate_per_hour,
                             minlength=n_pools)
        if spec.pools + 3 > n_pools or spec.launch_day * 24 >= market.n_ticks * market.tick_hours:
            raise ValueError(f"a launch of {spec.pools} pools from day {spec.launch_day} needs "
                             f"{spec.pools + 3} pools and a longer horizon")
        return draw_regional_launch_schedule(
            market.pool_of_user, demand, market.n_ticks, pools=spec.pools, choose=spec.choose,
            launch_tick=spec.launch_day * 24 // market.tick_hours, rng=rng)

    def estimate(self, spec: DesignSpec, panel: OutcomePanel, schedule: AssignmentSchedule, *,
                 confidence: float, tick_hours: int):
        from spillgauge.estimators.synthetic_did import (
            synthetic_difference_in_differences,
        )

        if spec.estimator == "synthetic_did" and spec.variance != "placebo":
            return synthetic_difference_in_differences(panel, schedule, confidence=confidence,
                                                       variance=spec.variance)
        return super().estimate(spec, panel, schedule, confidence=confidence,
                                tick_hours=tick_hours)

    def truth(self, spec: DesignSpec, schedule: AssignmentSchedule, panel: OutcomePanel,
              control: OutcomePanel) -> tuple[float, float]:
        """Mean over the launched pools' users of launch minus all-control fulfilled orders
        over the post-launch days; side effect: the same over the other pools' users."""
        start_day = int(schedule.period_start_ticks[1]) * panel.tick_hours // 24
        gain = (panel.outcome_days[:, start_day:].sum(axis=1).astype(float)
                - control.outcome_days[:, start_day:].sum(axis=1))
        launched = schedule.user_is_treated(1)

        def mean(values: np.ndarray) -> float:
            return float(values.mean()) if values.size else float("nan")

        return mean(gain[launched]), mean(gain[~launched])

    def truth_control_mean(self, spec: DesignSpec, schedule: AssignmentSchedule,
                           control: OutcomePanel) -> float:
        """Mean over the launched pools' users of their all-control outcome after the launch."""
        start_day = int(schedule.period_start_ticks[1]) * control.tick_hours // 24
        launched = schedule.user_is_treated(1)
        level = control.outcome_days[launched, start_day:].sum(axis=1)
        return float(level.mean()) if level.size else float("nan")
