"""Minimax switchbacks: randomization points of Bojinov, Simchi-Levi & Zhao (2023).

The market (or each pool) draws a fresh arm, treated with probability 1/2, at
the minimax-optimal points for a carryover of order ``m`` ticks: a first and a
last block of ``2m`` ticks and blocks of ``m`` in between
(:func:`~spillgauge.estimators.switchback.switchback_optimal_points`). The
order ``m`` is estimated from the market's carryover half-life: the ticks until
the treatment's dose after a switch falls below ``residual_dose``, rounded up
to a divisor of the horizon (the design needs one; a longer assumed order costs
variance, never bias). The world is analysed by the block difference over
blocks of ``m`` ticks with a burn-in of ``m``: only blocks that kept the previous
block's arm are compared, so the carryover a switch leaves is not counted.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from spillgauge.designs._draw import draw_treated_units
from spillgauge.designs.kind import DesignKind, MarketView, inference_keys
from spillgauge.estimators.estimate import Estimate
from spillgauge.estimators.switchback import switchback_optimal_points
from spillgauge.panel import OutcomePanel
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.keys import DesignKey, check
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["SwitchbackMinimax", "carryover_order"]


def carryover_order(half_life_hours: float, tick_hours: int, n_ticks: int,
                    residual_dose: float) -> int:
    """Return the carryover order ``m`` in ticks for the minimax points.

    ``m`` is the smallest divisor of ``n_ticks`` that is at least the ticks after
    which the dose ``2^(-hours / half_life)`` (docs/model.md) is at most
    ``residual_dose``; 0 without carryover.

    >>> carryover_order(2.0, 1, 1344, 0.05)  # dose < 5% after 9 h; 12 divides 1344
    12
    >>> carryover_order(0.0, 1, 672, 0.05)
    0
    """
    if half_life_hours <= 0:
        return 0
    needed = max(1, math.ceil(half_life_hours * math.log2(1 / residual_dose) / tick_hours
                              - 1e-9))
    return next((m for m in range(needed, n_ticks + 1) if n_ticks % m == 0), needed)


class SwitchbackMinimax(DesignKind):
    """A switchback randomized at the minimax points for the scenario's carryover."""

    name = "switchback_minimax"
    compares_periods = True
    summary = ("the market, or each pool, redraws its arm at the minimax-optimal points for "
               "the carryover (Bojinov, Simchi-Levi & Zhao 2023)")
    keys = (
        DesignKey(name="residual_dose", type=float, default=0.05, minimum=0, maximum=1,
                  exclusive_minimum=True, exclusive_maximum=True,
                  doc="the carryover order is the time until the dose after a switch falls "
                      "below this share (from effect.carryover_half_life_hours)"),
        DesignKey(name="per", type=str, default="market", choices=("market", "pool"),
                  doc="`\"market\"` switches everyone together; `\"pool\"` switches each pool "
                      "on its own draw"),
        *inference_keys(),
    )
    shown_keys = ("per",)

    def _order(self, market: MarketView, spec: DesignSpec) -> int:
        return carryover_order(market.carryover_half_life_hours, market.tick_hours,
                               market.n_ticks, spec.residual_dose)

    def check(self, spec: DesignSpec, scenario: Scenario) -> None:
        calendar = scenario.calendar
        m = carryover_order(scenario.effect.carryover_half_life_hours, calendar.tick_hours,
                            calendar.n_ticks, spec.residual_dose)
        check(m == 0 or calendar.n_ticks // m >= 4, "calendar.days",
              f"long enough for 4 carryover orders of {m * calendar.tick_hours} h "
              f"({spec.at} is a minimax switchback)", calendar.days)

    def default_label(self, spec: DesignSpec) -> str:
        label = "switchback-minimax"
        if spec.residual_dose != 0.05:
            label += f"-dose{spec.residual_dose:g}"
        return label + ("-per-pool" if spec.per == "pool" else "")

    def describe_unit(self, spec: DesignSpec) -> str:
        where = "pool" if spec.per == "pool" else "market"
        return f"{where} time block at the minimax points for the carryover"

    def estimator_name(self, spec: DesignSpec) -> str:
        return "switchback_difference"

    def draw(self, market: MarketView, spec: DesignSpec, *, rng: np.random.Generator
             ) -> AssignmentSchedule:
        check_rng(rng)
        unit_of_user = (np.asarray(market.pool_of_user, dtype=np.int64) if spec.per == "pool"
                        else np.zeros(market.n_users, dtype=np.int64))
        n_units = int(unit_of_user.max()) + 1 if unit_of_user.size else 1
        starts = switchback_optimal_points(market.n_ticks, self._order(market, spec)) - 1
        treated = np.stack([draw_treated_units(n_units, share=0.5, randomization="bernoulli",
                                               rng=rng) for _ in starts], axis=1)
        return AssignmentSchedule(unit_of_user=unit_of_user, is_treated=treated,
                                  period_start_ticks=starts, n_ticks=market.n_ticks,
                                  treated_probability=0.5,
                                  unit_kind="market" if n_units == 1 else "pool",
                                  randomization="bernoulli")

    def estimate(self, spec: DesignSpec, panel: OutcomePanel, schedule: AssignmentSchedule, *,
                 confidence: float, tick_hours: int) -> Estimate:
        from spillgauge.estimators.switchback import switchback_difference

        lengths = schedule.period_lengths()
        m = int(lengths.min())
        if m <= 1 or lengths.size < 3:  # no carryover: one tick per block, nothing to leave out
            return switchback_difference(panel, schedule, confidence=confidence)
        # The block difference compares blocks position by position, so it needs blocks of
        # one length: the first and last blocks (2m ticks, one draw each) are read as two
        # blocks of m with the same arm, and a burn-in of m ticks leaves out every block that
        # switched arm, where the previous arm's carryover can still reach.
        starts = np.arange(0, schedule.n_ticks, m, dtype=np.int64)
        period = np.searchsorted(schedule.period_start_ticks, starts, side="right") - 1
        equal = dataclasses.replace(schedule, is_treated=schedule.is_treated[:, period],
                                    period_start_ticks=starts)
        return switchback_difference(panel, equal, confidence=confidence, burn_in_ticks=m)
