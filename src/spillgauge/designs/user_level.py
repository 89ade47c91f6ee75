"""User-level designs: Bernoulli or complete randomization of users."""

from __future__ import annotations

import numpy as np

from spillgauge.designs._draw import draw_treated_units, draw_treated_within_strata
from spillgauge.designs.kind import (
    MIN_CLUSTERS_PER_ARM,
    DesignKind,
    MarketView,
    clusters_per_arm,
    inference_keys,
    randomization_key,
    share_key,
)
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.keys import DesignKey, check
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["PRE_PERIOD_STRATA", "STRATA", "UserLevel", "draw_user_schedule", "market_strata", "merge_small_strata"]

STRATA = ("none", "pre_period", "pools")  # what a stratified user design blocks on
PRE_PERIOD_STRATA = 4  # default number of pre-period order groups


def merge_small_strata(strata: np.ndarray, share: float) -> np.ndarray:
    """Return strata in which every stratum can hold two users in each arm.

    Strata whose ``round(share * n_s)`` split leaves an arm with fewer than
    two users (the within-stratum variance needs two) are drawn together as one
    stratum; when that stratum is still too small it joins the smallest of the
    others. Codes come back consecutive from 0, in the order of the input codes.

    >>> merge_small_strata(np.array([0, 0, 0, 0, 1, 2, 2, 2, 2, 3]), 0.5).tolist()
    [0, 0, 0, 0, 0, 1, 1, 1, 1, 0]
    """
    codes, stratum, sizes = np.unique(np.asarray(strata), return_inverse=True,
                                      return_counts=True)

    def fits(n: int) -> bool:
        return clusters_per_arm(int(n), share, "complete") >= MIN_CLUSTERS_PER_ARM

    small = np.array([not fits(n) for n in sizes], dtype=bool)
    if small.any() and not small.all():
        target = int(np.flatnonzero(small)[0])
        if not fits(sizes[small].sum()):
            target = int(np.flatnonzero(~small)[np.argmin(sizes[~small])])
        mapped = np.arange(codes.size)
        mapped[small] = target
        stratum = mapped[stratum]
    elif small.all():
        stratum = np.zeros_like(stratum)
    return np.unique(stratum, return_inverse=True)[1].astype(np.int64)


def market_strata(market: MarketView, spec: DesignSpec) -> np.ndarray:
    """Return each user's stratum under the spec's ``strata``, shape ``(n_users,)``.

    ``"pre_period"``: users in order of pre-period orders (ties in user order)
    cut into ``pre_period_strata`` groups of equal size (order quantiles);
    ``"pools"``: each user's home stock pool. Strata too small for two users
    per arm are merged (:func:`merge_small_strata`).
    """
    if spec.strata == "pre_period":
        n_users, k = market.n_users, int(spec.pre_period_strata)
        rank = np.empty(n_users, dtype=np.int64)
        rank[np.argsort(np.asarray(market.history), kind="stable")] = np.arange(n_users)
        raw = rank * k // max(n_users, 1)
    else:
        raw = np.asarray(market.pool_of_user)
    return merge_small_strata(raw, spec.share)


def draw_user_schedule(n_users: int, n_ticks: int, *, share: float = 0.5,
                       randomization: str = "complete", strata: np.ndarray | None = None,
                       rng: np.random.Generator) -> AssignmentSchedule:
    """Draw a user-level schedule: each user keeps one arm over the horizon.

    Parameters
    ----------
    n_users, n_ticks : int
    share : float
        Share of users treated (exact under complete randomization, expected
        under Bernoulli).
    randomization : {"complete", "bernoulli"}
    strata : ndarray of int, shape (n_users,), optional
        Stratum of each user: exactly ``round(share * n_s)`` of each stratum are
        treated (complete randomization within strata); kept on the schedule.
    rng : numpy.random.Generator

    Examples
    --------
    >>> s = draw_user_schedule(10, 24, share=0.3, rng=np.random.default_rng(0))
    >>> int(s.user_is_treated().sum()), s.unit_kind
    (3, 'user')
    """
    check_rng(rng)
    if strata is None:
        treated = draw_treated_units(n_users, share=share, randomization=randomization, rng=rng)
    elif randomization != "complete":
        raise ValueError(f"strata need randomization='complete'; got {randomization!r}")
    else:
        treated = draw_treated_within_strata(strata, share=share, rng=rng)
    return AssignmentSchedule(unit_of_user=np.arange(n_users), is_treated=treated[:, None],
                              period_start_ticks=np.zeros(1, dtype=np.int64), n_ticks=n_ticks,
                              treated_probability=share, unit_kind="user",
                              randomization=randomization, stratum_of_unit=strata)


class UserLevel(DesignKind):
    """Users randomized one by one, optionally within strata; difference in means or CUPED."""

    name = "user"
    summary = "each user keeps one arm over the horizon"
    keys = (
        share_key("share of users treated"),
        randomization_key(),
        DesignKey(name="adjust", type=bool, default=False,
                  doc="regression adjustment on pre-period orders (CUPED)"),
        DesignKey(name="strata", type=str, default="none", choices=STRATA,
                  doc="stratified (blocked) randomization: `\"none\"`, `\"pre_period\"` "
                      "(groups of equal size by pre-period orders) or `\"pools\"` (home "
                      "stock pools); exactly round(share x users) of each stratum are "
                      "treated, analysed by the stratified difference in means"),
        DesignKey(name="pre_period_strata", type=int, default=PRE_PERIOD_STRATA, minimum=2, maximum=1000,
                  doc="number of pre-period order groups (read only when strata = "
                      "\"pre_period\")"),
        *inference_keys(),
    )
    is_user_level = True

    def check(self, spec: DesignSpec, scenario: Scenario) -> None:
        if spec.strata == "none":
            return
        check(spec.randomization == "complete", f"{spec.at}.randomization",
              "'complete' when strata are set (a fixed share is treated in each stratum)",
              spec.randomization)
        if spec.strata == "pre_period":
            check(scenario.users.history_days >= 1, f"{spec.at}.strata",
                  "'none' or 'pools' when users.history_days = 0 (no pre-period to stratify "
                  "on)", spec.strata)
            if scenario.users.file is None:
                size = scenario.users.count // spec.pre_period_strata
                fewest = clusters_per_arm(size, spec.share, "complete")
                check(fewest >= MIN_CLUSTERS_PER_ARM, f"{spec.at}.pre_period_strata",
                      f"small enough for {MIN_CLUSTERS_PER_ARM} users per arm in each stratum "
                      f"({scenario.users.count} users at share {spec.share:g} leave {fewest})",
                      spec.pre_period_strata)

    def default_label(self, spec: DesignSpec) -> str:
        label = "user-cuped" if spec.adjust else "user"
        if spec.strata == "pools":
            label += "-strata-pools"
        elif spec.strata == "pre_period":
            label += "-strata-pre" + (str(spec.pre_period_strata)
                                      if spec.pre_period_strata != PRE_PERIOD_STRATA else "")
        return label

    def describe_unit(self, spec: DesignSpec) -> str:
        return "user"

    def estimator_name(self, spec: DesignSpec) -> str:
        name = "regression_adjusted_difference" if spec.adjust else "difference_in_means"
        return name if spec.strata == "none" else f"stratified_{name}"

    def draw(self, market: MarketView, spec: DesignSpec, *, rng: np.random.Generator
             ) -> AssignmentSchedule:
        strata = None if spec.strata == "none" else market_strata(market, spec)
        return draw_user_schedule(market.n_users, market.n_ticks, share=spec.share,
                                  randomization=spec.randomization, strata=strata, rng=rng)
