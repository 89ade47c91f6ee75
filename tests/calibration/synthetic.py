"""Synthetic worlds for null-calibration checks of the estimators' intervals.

Outcomes are drawn directly as panels (no market), so thousands of replications
run in seconds. Under the sharp null the outcome ignores the assignment; the
GTE is then exactly 0 and a 95% interval must cover 0 in about 95% of draws.
With ``effect_sd > 0`` each cluster gets its own additive effect and the GTE is
their user-weighted mean.
"""

from __future__ import annotations

import numpy as np

from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["cluster_world", "switchback_world", "market_shocks"]


def market_shocks(n_days: int, *, rho: float, sd: float, rng: np.random.Generator
                  ) -> np.ndarray:
    """Return ``exp`` of a stationary AR(1) series of daily market shocks, shape ``(n_days,)``."""
    values = np.empty(n_days)
    values[0] = rng.normal(0.0, sd / np.sqrt(1 - rho ** 2))
    for day in range(1, n_days):
        values[day] = rho * values[day - 1] + rng.normal(0.0, sd)
    return np.exp(values)


def diurnal(n_ticks: int, amplitude: float = 0.6) -> np.ndarray:
    """Return an hourly demand multiplier with one peak a day, shape ``(n_ticks,)``."""
    hour = np.arange(n_ticks) % 24
    return 1.0 + amplitude * np.sin(2 * np.pi * (hour - 6) / 24)


def cluster_world(n_clusters: int, *, rng: np.random.Generator, users_per_cluster=40,
                  cluster_sd: float = 0.5, effect_sd: float = 0.0, share: float = 0.5,
                  unequal: bool = False) -> tuple[OutcomePanel, AssignmentSchedule, float]:
    """Draw one cluster-randomized world; return (panel, schedule, GTE).

    Users have Poisson orders whose mean carries a Gamma cluster effect (cluster
    heterogeneity: the reason cluster designs have few effective units). With
    ``effect_sd``, cluster ``g``'s users gain ``delta_g ~ N(0, effect_sd)`` orders
    when treated (no interference: only the own cluster's arm matters).
    """
    sizes = (rng.integers(users_per_cluster // 3, 2 * users_per_cluster, n_clusters)
             if unequal else np.full(n_clusters, users_per_cluster))
    cluster = np.repeat(np.arange(n_clusters), sizes)
    level = rng.gamma(1 / cluster_sd ** 2, 5.0 * cluster_sd ** 2, n_clusters)
    delta = rng.normal(0.0, effect_sd, n_clusters) if effect_sd else np.zeros(n_clusters)
    n_treated = round(share * n_clusters)
    is_treated = np.zeros(n_clusters, dtype=bool)
    is_treated[rng.permutation(n_clusters)[:n_treated]] = True
    base = rng.poisson(level[cluster]).astype(float)
    outcome = base + np.where(is_treated[cluster], delta[cluster], 0.0)
    gte = float(np.sum(delta * sizes) / sizes.sum())
    panel = OutcomePanel.from_arrays(fulfilled=outcome)
    schedule = AssignmentSchedule(
        unit_of_user=cluster, is_treated=is_treated[:, None], period_start_ticks=[0],
        n_ticks=1, treated_probability=n_treated / n_clusters, unit_kind="cluster",
        randomization="complete")
    return panel, schedule, gte


def switchback_world(n_blocks: int, *, block_ticks: int = 24, share: float = 0.5,
                     users: int = 2000, rate_per_user_hour: float = 0.01,
                     rng: np.random.Generator) -> tuple[OutcomePanel, AssignmentSchedule]:
    """Draw one market switchback under the sharp null; return (panel, schedule).

    Market orders per hour are Poisson with a diurnal rhythm and AR(1) daily
    market shocks (the time-varying error that every block shares within a day).
    Each block's arm is Bernoulli(``share``), as the switchback design draws it.
    """
    n_ticks = n_blocks * block_ticks
    days = np.arange(n_ticks) // 24
    shocks = market_shocks(int(days.max()) + 1, rho=0.5, sd=0.15, rng=rng)
    mean = users * rate_per_user_hour * diurnal(n_ticks) * shocks[days]
    orders = rng.poisson(mean)
    # one pseudo-user per market holds the market's orders; users_per_pool gives the count
    panel = OutcomePanel.from_arrays(fulfilled=orders[None, :])
    arms = rng.random(n_blocks) < share
    schedule = AssignmentSchedule(
        unit_of_user=np.zeros(1, dtype=np.int64), is_treated=arms[None, :],
        period_start_ticks=np.arange(n_blocks) * block_ticks, n_ticks=n_ticks,
        treated_probability=share, unit_kind="market", randomization="bernoulli")
    return panel, schedule


def rollout_world(n_pools: int = 20, *, waves: int = 4, days: int = 14, lift: float = 0.0,
                  lift_sd: float = 0.0, shock_sd: float = 0.15, amplitude: float = 0.6,
                  users_per_pool: int = 100, rate_per_user_hour: float = 0.01,
                  rng: np.random.Generator) -> tuple[OutcomePanel, AssignmentSchedule, float]:
    """Draw one staggered rollout over pools; return (panel, schedule, GTE).

    Pool ``p``'s orders per hour are Poisson with mean
    ``N_p r_p diurnal(t) shock(day) (1 + lift_p D_pt)``: market-wide AR(1) daily shocks
    and a diurnal rhythm (common to all pools), pool levels ``r_p`` and lifts
    ``lift_p ~ N(lift, lift_sd)``. The GTE is the expected difference between all
    pools treated and none, per user over the horizon, given the shocks.
    """
    from spillgauge.designs.rollout import draw_rollout_schedule

    n_ticks = days * 24
    users = rng.integers(users_per_pool // 2, 3 * users_per_pool // 2, n_pools)
    level = rng.gamma(4.0, rate_per_user_hour / 4.0, n_pools)
    lifts = lift + lift_sd * rng.standard_normal(n_pools)
    common = diurnal(n_ticks, amplitude) * market_shocks(days, rho=0.5, sd=shock_sd,
                                                         rng=rng)[np.arange(n_ticks) // 24]
    pool_of_user = np.repeat(np.arange(n_pools), users)
    schedule = draw_rollout_schedule(pool_of_user, n_ticks, waves=waves, rng=rng)
    on = schedule.is_treated[:, schedule.period_of_tick()]             # (pools, ticks)
    base = (users * level)[:, None] * common[None, :]
    orders = rng.poisson(base * (1 + lifts[:, None] * on))
    gte = float(np.sum(base * lifts[:, None]) / users.sum())
    panel = OutcomePanel.from_arrays(
        fulfilled=np.zeros((users.sum(), 1), dtype=np.int64), pool_of_user=pool_of_user,
        pool_fulfilled=orders, pool_demanded=orders, pool_lost=np.zeros_like(orders),
        pool_stock=np.zeros_like(orders))
    return panel, schedule, gte


def interference_world(n_clusters: int, *, rng: np.random.Generator, users_per_cluster=40,
                       effect: float = 1.0, effect_sd: float = 2.0
                       ) -> tuple[OutcomePanel, AssignmentSchedule]:
    """Draw one test-of-interference world without interference; return (panel, schedule).

    Each cluster's users gain ``delta_g ~ N(effect, effect_sd)`` orders when treated
    themselves, whatever anyone else's arm: no interference, effects that differ
    across clusters.
    """
    from spillgauge.designs.interference import draw_interference_schedule

    cluster = np.repeat(np.arange(n_clusters), users_per_cluster)
    level = rng.gamma(4.0, 1.25, n_clusters)
    delta = rng.normal(effect, effect_sd, n_clusters)
    schedule = draw_interference_schedule(cluster, 1, rng=rng)
    treated = schedule.user_is_treated()
    outcome = rng.poisson(level[cluster]) + np.where(treated, delta[cluster], 0.0)
    return OutcomePanel.from_arrays(fulfilled=outcome), schedule
