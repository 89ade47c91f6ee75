"""AssignmentSchedule: who is treated when, stored compactly.

A schedule maps each user to an assignment *unit* (the user itself, a cluster,
a pool or the whole market) and holds a boolean ``(n_units, n_periods)`` table:
unit ``u`` is treated during period ``k`` (ticks ``period_start_ticks[k]`` up
to the next start). A user x tick pattern is never stored.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import sparse

__all__ = ["AssignmentSchedule", "UNIT_KINDS", "RANDOMIZATIONS", "read_only_view"]

UNIT_KINDS = ("user", "cluster", "pool", "market")
RANDOMIZATIONS = ("complete", "bernoulli")  # how a design draws its units ("fixed": a truth world)


def read_only_view(array: np.ndarray) -> np.ndarray:
    """Return a read-only view of ``array``; the caller's array stays writable.

    >>> a = np.arange(3)
    >>> v = read_only_view(a)
    >>> v.flags.writeable, a.flags.writeable
    (False, True)
    """
    view = np.asarray(array).view()
    view.setflags(write=False)
    return view


@dataclass(frozen=True, eq=False, slots=True)
class AssignmentSchedule:
    """Who is treated when.

    Parameters
    ----------
    unit_of_user : ndarray of int, shape (n_users,)
        Assignment unit of each user, in ``[0, n_units)``.
    is_treated : ndarray of bool, shape (n_units, n_periods)
        Whether each unit is treated in each period.
    period_start_ticks : ndarray of int, shape (n_periods,)
        First tick of each period; starts at 0 and strictly increases.
    n_ticks : int
        Ticks in the horizon.
    treated_probability : float
        Marginal probability that a unit is treated in a period under the design
        that drew the schedule (``nan`` for the fixed all-treated / all-control
        schedules).
    unit_kind : str
        One of ``"user"``, ``"cluster"``, ``"pool"``, ``"market"``.
    randomization : str
        How units were drawn: ``"complete"`` (exactly ``round(share * n_units)``
        units treated per period), ``"bernoulli"`` (each unit independently) or
        ``"fixed"`` (a counterfactual world).
    cluster_of_user : ndarray of int, shape (n_users,), optional
        For a test of interference: each user's cluster.
    is_cluster_arm : ndarray of bool, shape (n_clusters,), optional
        For a test of interference: the clusters randomized whole (the others'
        users were randomized one by one).
    exposure_units : scipy.sparse.csr_array of shape (n_users, n_units), optional
        For exposure-mapping estimators: entry ``(i, u)`` is non-zero when unit
        ``u`` holds a member of user ``i``'s closed graph neighbourhood.
    stratum_of_unit : ndarray of int, shape (n_units,), optional
        For stratified (blocked) randomization: each unit's stratum, in
        ``[0, n_strata)``; a fixed share was treated within every stratum, and
        re-draws of the assignment permute units within their stratum.

    Examples
    --------
    >>> s = AssignmentSchedule.fixed(n_users=3, n_ticks=4, is_treated=True)
    >>> s.user_is_treated().tolist()
    [True, True, True]
    >>> s.unit_tick_treated().shape
    (1, 4)
    """

    unit_of_user: np.ndarray
    is_treated: np.ndarray
    period_start_ticks: np.ndarray
    n_ticks: int
    treated_probability: float = float("nan")
    unit_kind: str = "user"
    randomization: str = "fixed"
    exposure_units: sparse.csr_array | None = None
    cluster_of_user: np.ndarray | None = None
    is_cluster_arm: np.ndarray | None = None
    stratum_of_unit: np.ndarray | None = None

    def __post_init__(self) -> None:
        unit_of_user = np.asarray(self.unit_of_user, dtype=np.int64)
        is_treated = np.asarray(self.is_treated, dtype=bool)
        starts = np.asarray(self.period_start_ticks, dtype=np.int64)
        if is_treated.ndim != 2:
            raise ValueError(f"is_treated must be 2-D (n_units, n_periods); got {is_treated.shape}")
        if starts.shape != (is_treated.shape[1],):
            raise ValueError("period_start_ticks must have one entry per period")
        if starts.size == 0 or starts[0] != 0 or np.any(np.diff(starts) <= 0) or \
                starts[-1] >= self.n_ticks:
            raise ValueError("period_start_ticks must start at 0, increase, and stay < n_ticks")
        if unit_of_user.ndim != 1 or (unit_of_user.size and (
                unit_of_user.min() < 0 or unit_of_user.max() >= is_treated.shape[0])):
            raise ValueError("unit_of_user must be 1-D with values in [0, n_units)")
        if self.randomization not in (*RANDOMIZATIONS, "fixed"):
            raise ValueError(f"randomization must be one of {(*RANDOMIZATIONS, 'fixed')}; "
                             f"got {self.randomization!r}")
        if self.unit_kind not in UNIT_KINDS:
            raise ValueError(f"unit_kind must be one of {UNIT_KINDS}; got {self.unit_kind!r}")
        if self.stratum_of_unit is not None:
            strata = np.asarray(self.stratum_of_unit, dtype=np.int64)
            if strata.shape != (is_treated.shape[0],) or (strata.size and strata.min() < 0):
                raise ValueError("stratum_of_unit must hold one stratum >= 0 per unit")
            object.__setattr__(self, "stratum_of_unit", read_only_view(strata))
        for name, value in (("unit_of_user", unit_of_user), ("is_treated", is_treated),
                            ("period_start_ticks", starts)):
            object.__setattr__(self, name, read_only_view(value))

    @classmethod
    def fixed(cls, *, n_users: int, n_ticks: int, is_treated: bool) -> AssignmentSchedule:
        """Return the schedule of a counterfactual world: everyone treated or no one."""
        return cls(unit_of_user=np.zeros(n_users, dtype=np.int64),
                   is_treated=np.full((1, 1), bool(is_treated)),
                   period_start_ticks=np.zeros(1, dtype=np.int64), n_ticks=n_ticks,
                   unit_kind="market")

    @property
    def n_users(self) -> int:
        """Number of users."""
        return int(self.unit_of_user.size)

    @property
    def n_units(self) -> int:
        """Number of assignment units."""
        return int(self.is_treated.shape[0])

    @property
    def n_periods(self) -> int:
        """Number of periods (1 for a schedule fixed over the horizon)."""
        return int(self.is_treated.shape[1])

    @property
    def is_static(self) -> bool:
        """True when every unit keeps one arm over the whole horizon."""
        return self.n_periods == 1

    def period_of_tick(self) -> np.ndarray:
        """Return the period index of every tick, shape ``(n_ticks,)``."""
        return np.searchsorted(self.period_start_ticks, np.arange(self.n_ticks), side="right") - 1

    def period_lengths(self) -> np.ndarray:
        """Return the number of ticks in each period, shape ``(n_periods,)``."""
        return np.diff(np.append(self.period_start_ticks, self.n_ticks))

    def unit_tick_treated(self) -> np.ndarray:
        """Return the unit x tick treatment table, shape ``(n_units, n_ticks)``."""
        return np.repeat(self.is_treated, self.period_lengths(), axis=1)

    def user_is_treated(self, period: int = 0) -> np.ndarray:
        """Return whether each user is treated in one period, shape ``(n_users,)``."""
        return self.is_treated[self.unit_of_user, period]

    def treated_share(self) -> float:
        """Return the share of user-ticks that are treated."""
        per_unit = self.is_treated @ self.period_lengths() / self.n_ticks
        return float(per_unit[self.unit_of_user].mean()) if self.n_users else float("nan")
