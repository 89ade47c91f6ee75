"""Treatment dose, carryover and peer exposure: the kernels behind a world's demand rates.

A user's demand rate at tick t is
``base_i * diurnal(t) * (1 + lift * d_i(t)) * (1 + peer_lift * e_i(t))``, where
``d_i`` is the user's dose (1 while treated, decaying with the carryover
half-life after the user leaves treatment, 0 when never treated) and ``e_i`` the
mean dose of the user's graph neighbours (0 for a user with none).
"""

from __future__ import annotations

import numpy as np
from scipy import sparse

from spillgauge.market.graph import treated_neighbour_share
from spillgauge.schedule import AssignmentSchedule

__all__ = ["unit_dose", "peer_exposure_of_events", "own_dose_of_events"]


def unit_dose(schedule: AssignmentSchedule, *, half_life_hours: float, tick_hours: int
              ) -> np.ndarray:
    """Return each unit's dose in each tick, shape ``(n_units, n_ticks)``, or ``(n_units, 1)``.

    A static schedule (one period) gives one column: the dose never changes.

    The dose is 1 in a treated tick. In an untreated tick ``k`` after the unit's
    last treated tick ``j`` it is ``2 ** (-(k - j) * tick_hours / half_life_hours)``
    (0 when the half-life is 0), and 0 before any treatment.

    Examples
    --------
    >>> s = AssignmentSchedule(unit_of_user=np.array([0]), is_treated=np.array([[True, False]]),
    ...                        period_start_ticks=np.array([0, 2]), n_ticks=5)
    >>> unit_dose(s, half_life_hours=1.0, tick_hours=1).tolist()
    [[1.0, 1.0, 0.5, 0.25, 0.125]]
    """
    if schedule.is_static:
        return schedule.is_treated.astype(float)
    treated = schedule.unit_tick_treated()
    ticks = np.arange(schedule.n_ticks)
    last = np.maximum.accumulate(np.where(treated, ticks, -1), axis=1)
    dose = treated.astype(float)
    if half_life_hours > 0:
        after = ~treated & (last >= 0)
        dose[after] = np.exp2(-(ticks[None, :] - last)[after] * tick_hours / half_life_hours)
    return dose


def own_dose_of_events(dose: np.ndarray, unit_of_user: np.ndarray, users: np.ndarray,
                       ticks: np.ndarray) -> np.ndarray:
    """Return the dose of each order event's user at the event's tick, shape ``(n_events,)``."""
    if dose.shape[1] == 1:
        return dose[unit_of_user, 0][users]
    return dose[unit_of_user[users], ticks]


def peer_exposure_of_events(adjacency: sparse.csr_array, unit_of_user: np.ndarray,
                            dose: np.ndarray, users: np.ndarray, ticks: np.ndarray
                            ) -> np.ndarray:
    """Return ``e_i(t)`` for each order event: the mean neighbour dose of its user at its tick.

    Parameters
    ----------
    adjacency : csr_array, shape (n_users, n_users)
    unit_of_user : ndarray of int, shape (n_users,)
    dose : ndarray of float, shape (n_units, n_ticks)
        From :func:`unit_dose`.
    users, ticks : ndarray of int, shape (n_events,)

    Notes
    -----
    When every unit's dose is constant over time this is a gather from one
    sparse product. Otherwise the user x unit neighbour-share matrix
    ``W = D^-1 A U`` (U the unit membership) is expanded per event, so the cost
    is events x (units touching a neighbourhood), never users x ticks.
    """
    n_users = adjacency.shape[0]
    if dose.shape[1] == 1:
        return treated_neighbour_share(adjacency, dose[unit_of_user, 0])[users]
    degree = np.diff(adjacency.indptr).astype(float)
    membership = sparse.csr_array((np.ones(n_users), (np.arange(n_users), unit_of_user)),
                                  shape=(n_users, dose.shape[0]))
    share = (adjacency @ membership).tocsr()
    share.sum_duplicates()
    row_degree = np.repeat(degree, np.diff(share.indptr))
    share.data = share.data / row_degree
    counts = np.diff(share.indptr)[users]
    event_of_entry = np.repeat(np.arange(users.size), counts)
    first = share.indptr[users]
    within = np.arange(event_of_entry.size) - np.repeat(np.cumsum(counts) - counts, counts)
    entry = np.repeat(first, counts) + within
    values = share.data[entry] * dose[share.indices[entry], ticks[event_of_entry]]
    return np.bincount(event_of_entry, weights=values, minlength=users.size)
