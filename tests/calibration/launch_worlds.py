"""Synthetic regional launches for null-calibration checks of the launch estimators.

Outcomes are drawn directly as pool-day panels (no market), so thousands of
replications run in seconds. Pool ``p`` has ``N_p`` users with a per-user level
``r_p``; its orders on day ``d`` are Poisson with mean
``N_p r_p c_d s_pd (1 + lift D_pd)``, where ``c_d`` is market-wide (a geometric
trend times AR(1) daily shocks, shared by every pool: parallel trends in
proportion), ``s_pd`` the pool's own AR(1) daily shock and, with
``factor_sd > 0``, a pool-specific random-walk factor path (pools then follow
different trends). Under ``lift = 0`` the effect on the launched pools is
exactly 0.
"""

from __future__ import annotations

import numpy as np

from spillgauge.designs.regional_launch import draw_regional_launch_schedule
from spillgauge.panel import OutcomePanel

__all__ = ["launch_world", "ar1_paths"]


def ar1_paths(n_series: int, n_days: int, *, rho: float, sd: float,
              rng: np.random.Generator) -> np.ndarray:
    """Return ``exp`` of stationary AR(1) series with innovation SD ``sd``, shape (n, days)."""
    values = np.empty((n_series, n_days))
    values[:, 0] = rng.normal(0.0, sd / np.sqrt(1 - rho ** 2), n_series)
    for day in range(1, n_days):
        values[:, day] = rho * values[:, day - 1] + rng.normal(0.0, sd, n_series)
    return np.exp(values)


def launch_world(*, rng: np.random.Generator, n_pools: int = 30, launched: int = 5,
                 days: int = 28, launch_day: int = 14, choose: str = "random",
                 users_per_pool: int = 120, rate_per_user_day: float = 0.4,
                 trend_per_day: float = 0.0, market_shock_sd: float = 0.0,
                 pool_shock_sd: float = 0.05, factor_sd: float = 0.0, lift: float = 0.0,
                 level_cv: float = 0.5) -> tuple[OutcomePanel, object, float]:
    """Draw one regional launch; return (panel, schedule, truth).

    Per-user levels ``r_p`` are Gamma with mean ``rate_per_user_day`` and
    coefficient of variation ``level_cv`` (equal when 0).

    ``truth`` is the expected effect on the launched pools given the world's
    shocks: the user-weighted mean over launched pools of ``lift`` times their
    expected post-launch orders per user (0 under the null).
    """
    users = rng.integers(users_per_pool // 2, 3 * users_per_pool // 2, n_pools)
    level = (rng.gamma(level_cv ** -2, rate_per_user_day * level_cv ** 2, n_pools)
             if level_cv > 0 else np.full(n_pools, rate_per_user_day))
    common = (1 + trend_per_day) ** np.arange(days)
    if market_shock_sd > 0:
        common = common * ar1_paths(1, days, rho=0.5, sd=market_shock_sd, rng=rng)[0]
    own = ar1_paths(n_pools, days, rho=0.5, sd=pool_shock_sd, rng=rng) if pool_shock_sd > 0 \
        else np.ones((n_pools, days))
    if factor_sd > 0:  # each pool's own loading on a shared random-walk factor
        factor = np.cumsum(rng.normal(0.0, factor_sd, days))
        own = own * np.exp(rng.normal(0.0, 1.0, n_pools)[:, None] * factor[None, :])
    pool_of_user = np.repeat(np.arange(n_pools), users)
    schedule = draw_regional_launch_schedule(pool_of_user, users * level, days, pools=launched,
                                             choose=choose, launch_tick=launch_day, rng=rng)
    on = schedule.is_treated[:, schedule.period_of_tick()]               # (pools, days)
    base = (users * level)[:, None] * common[None, :] * own
    orders = rng.poisson(base * (1 + lift * on))
    chosen = schedule.is_treated[:, 1]
    truth = float(np.sum(lift * base[chosen, launch_day:]) / users[chosen].sum())
    panel = OutcomePanel.from_arrays(
        fulfilled=np.zeros((users.sum(), 1), dtype=np.int64), pool_of_user=pool_of_user,
        pool_fulfilled=orders, pool_demanded=orders, pool_lost=np.zeros_like(orders),
        pool_stock=np.zeros_like(orders), tick_hours=24)
    return panel, schedule, truth
