"""Switchback designs: the market (or each pool) alternates arms in time blocks."""

from __future__ import annotations

import numpy as np

from spillgauge.designs._draw import draw_treated_units
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["draw_switchback_schedule"]


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
