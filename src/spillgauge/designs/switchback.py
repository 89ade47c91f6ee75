"""Switchback designs: the market (or each pool) alternates arms in time blocks."""

from __future__ import annotations

import numpy as np

from spillgauge.designs._draw import draw_treated_units
from spillgauge.designs.kind import DesignKind, MarketView, inference_keys, share_key
from spillgauge.estimators.estimate import Estimate
from spillgauge.panel import OutcomePanel
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.keys import DesignKey, check
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["Switchback", "draw_switchback_schedule"]


def draw_switchback_schedule(unit_of_user: np.ndarray, n_ticks: int, *, block_ticks: int,
                             share: float = 0.5, rng: np.random.Generator
                             ) -> AssignmentSchedule:
    """Draw a switchback schedule: every unit's arm is redrawn in each time block.

    Each block's arm is an independent Bernoulli(``share``) draw per unit
    (Bojinov, Simchi-Levi & Zhao 2023 randomize every block with p = 1/2).

    Parameters
    ----------
    unit_of_user : ndarray of int, shape (n_users,)
        All zeros to switch the whole market; pool labels to switch each pool.
    n_ticks : int
    block_ticks : int
        Block length in ticks; the last block may be shorter.
    share : float
    rng : numpy.random.Generator

    Examples
    --------
    >>> s = draw_switchback_schedule(np.zeros(5, dtype=int), 48, block_ticks=12,
    ...                              rng=np.random.default_rng(0))
    >>> s.n_periods, s.period_start_ticks.tolist(), s.unit_kind
    (4, [0, 12, 24, 36], 'market')
    """
    check_rng(rng)
    if block_ticks < 1:
        raise ValueError(f"block_ticks must be >= 1; got {block_ticks}")
    unit_of_user = np.asarray(unit_of_user, dtype=np.int64)
    n_units = int(unit_of_user.max()) + 1 if unit_of_user.size else 1
    starts = np.arange(0, n_ticks, block_ticks, dtype=np.int64)
    treated = np.stack([draw_treated_units(n_units, share=share, randomization="bernoulli",
                                           rng=rng) for _ in starts], axis=1)
    return AssignmentSchedule(unit_of_user=unit_of_user, is_treated=treated,
                              period_start_ticks=starts, n_ticks=n_ticks,
                              treated_probability=share,
                              unit_kind="market" if n_units == 1 else "pool",
                              randomization="bernoulli")


class Switchback(DesignKind):
    """The market (or each pool) alternates arms in time blocks; burn-in hours dropped."""

    name = "switchback"
    summary = "the market, or each pool, redraws its arm in every time block"
    keys = (
        share_key("probability that a unit is treated in a block"),
        DesignKey(name="block_hours", type=int, default=24, minimum=1,
                  doc="length of a time block in hours (a multiple of calendar.tick_hours, "
                      "at most half the horizon)"),
        DesignKey(name="burn_in_hours", type=int, default=0, minimum=0,
                  doc="burn-in: the first hours after a switch, where the previous arm's "
                      "carryover lingers, are estimated only from blocks that did not switch "
                      "(less than block_hours; see docs/designs.md)"),
        DesignKey(name="per", type=str, default="market", choices=("market", "pool"),
                  doc="`\"market\"` switches everyone together; `\"pool\"` switches each pool "
                      "on its own draw"),
        *inference_keys(),
    )
    shown_keys = ("block_hours", "per")
    keeps_switch_profile = True
    compares_periods = True

    def check(self, spec: DesignSpec, scenario: Scenario) -> None:
        check(spec.burn_in_hours < spec.block_hours, f"{spec.at}.burn_in_hours",
              f"in [0, block_hours={spec.block_hours})", spec.burn_in_hours)
        tick = scenario.calendar.tick_hours
        for key in ("block_hours", "burn_in_hours"):
            hours = getattr(spec, key)
            check(hours % tick == 0, f"{spec.at}.{key}",
                  f"a multiple of calendar.tick_hours={tick}", hours)
        horizon = scenario.calendar.horizon_hours
        check(spec.block_hours * 2 <= horizon, f"{spec.at}.block_hours",
              f"at most half the horizon ({horizon // 2} hours)", spec.block_hours)

    def analysis_clusters(self, spec: DesignSpec, scenario: Scenario) -> int:
        units = scenario.pools.count if spec.per == "pool" else 1
        return units * (scenario.calendar.horizon_hours // spec.block_hours)

    def default_label(self, spec: DesignSpec) -> str:
        label = f"switchback-{spec.block_hours}h"
        if spec.burn_in_hours:
            label += f"-burn{spec.burn_in_hours}h"
        if spec.per == "pool":
            label += "-per-pool"
        return label

    def describe_unit(self, spec: DesignSpec) -> str:
        where = "pool" if spec.per == "pool" else "market"
        burn = f", {spec.burn_in_hours} h burn-in after a switch" if spec.burn_in_hours else ""
        return f"{where} time block of {spec.block_hours} h{burn}"

    def estimator_name(self, spec: DesignSpec) -> str:
        return "switchback_difference"

    def draw(self, market: MarketView, spec: DesignSpec, *, rng: np.random.Generator
             ) -> AssignmentSchedule:
        unit_of_user = (market.pool_of_user if spec.per == "pool"
                        else np.zeros(market.n_users, dtype=np.int64))
        return draw_switchback_schedule(unit_of_user, market.n_ticks,
                                        block_ticks=spec.block_hours // market.tick_hours,
                                        share=spec.share, rng=rng)

    def estimate(self, spec: DesignSpec, panel: OutcomePanel, schedule: AssignmentSchedule, *,
                 confidence: float, tick_hours: int) -> Estimate:
        from spillgauge.estimators.switchback import switchback_difference

        return switchback_difference(panel, schedule, confidence=confidence,
                                     burn_in_ticks=spec.burn_in_hours // tick_hours)
