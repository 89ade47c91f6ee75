"""User-level designs: Bernoulli or complete randomization of users."""

from __future__ import annotations

import numpy as np

from spillgauge.designs._draw import draw_treated_units
from spillgauge.designs.kind import (
    DesignKind,
    MarketView,
    inference_keys,
    randomization_key,
    share_key,
)
from spillgauge.scenario import DesignSpec
from spillgauge.scenario.keys import DesignKey
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["UserLevel", "draw_user_schedule"]


def draw_user_schedule(n_users: int, n_ticks: int, *, share: float = 0.5,
                       randomization: str = "complete", rng: np.random.Generator
                       ) -> AssignmentSchedule:
    """Draw a user-level schedule: each user keeps one arm over the horizon.

    Parameters
    ----------
    n_users, n_ticks : int
    share : float
        Share of users treated (exact under complete randomization, expected
        under Bernoulli).
    randomization : {"complete", "bernoulli"}
    rng : numpy.random.Generator

    Examples
    --------
    >>> s = draw_user_schedule(10, 24, share=0.3, rng=np.random.default_rng(0))
    >>> int(s.user_is_treated().sum()), s.unit_kind
    (3, 'user')
    """
    check_rng(rng)
    treated = draw_treated_units(n_users, share=share, randomization=randomization, rng=rng)
    return AssignmentSchedule(unit_of_user=np.arange(n_users), is_treated=treated[:, None],
                              period_start_ticks=np.zeros(1, dtype=np.int64), n_ticks=n_ticks,
                              treated_probability=share, unit_kind="user",
                              randomization=randomization)


class UserLevel(DesignKind):
    """Users randomized one by one; difference in means or CUPED."""

    name = "user"
    summary = "each user keeps one arm over the horizon"
    keys = (
        share_key("share of users treated"),
        randomization_key(),
        DesignKey(name="adjust", type=bool, default=False,
                  doc="regression adjustment on pre-period orders (CUPED)"),
        *inference_keys(),
    )
    is_user_level = True

    def default_label(self, spec: DesignSpec) -> str:
        return "user-cuped" if spec.adjust else "user"

    def describe_unit(self, spec: DesignSpec) -> str:
        return "user"

    def estimator_name(self, spec: DesignSpec) -> str:
        return "regression_adjusted_difference" if spec.adjust else "difference_in_means"

    def draw(self, market: MarketView, spec: DesignSpec, *, rng: np.random.Generator
             ) -> AssignmentSchedule:
        return draw_user_schedule(market.n_users, market.n_ticks, share=spec.share,
                                  randomization=spec.randomization, rng=rng)
