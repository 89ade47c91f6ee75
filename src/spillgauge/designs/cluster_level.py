"""Cluster-level designs: whole clusters (pools, graph communities) share one arm."""

from __future__ import annotations

import numpy as np
from scipy import sparse

from spillgauge.designs._draw import draw_treated_units
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["draw_cluster_schedule"]


def draw_cluster_schedule(cluster_of_user: np.ndarray, n_ticks: int, *, share: float = 0.5,
                          randomization: str = "complete", rng: np.random.Generator,
                          exposure_units: sparse.csr_array | None = None,
                          unit_kind: str = "cluster") -> AssignmentSchedule:
    """Draw a cluster-level schedule: each cluster keeps one arm over the horizon.

    Parameters
    ----------
    cluster_of_user : ndarray of int, shape (n_users,)
        Cluster labels ``0..n_clusters-1``.
    n_ticks : int
    share : float
        Share of clusters treated.
    randomization : {"complete", "bernoulli"}
    rng : numpy.random.Generator
    exposure_units : csr_array, shape (n_users, n_clusters), optional
        Clusters touching each user's closed neighbourhood, for exposure-mapping
        estimators (graph cluster randomization; Ugander et al. 2013).
    unit_kind : {"cluster", "pool"}

    Examples
    --------
    >>> s = draw_cluster_schedule(np.array([0, 0, 1, 1, 2, 2]), 24,
    ...                           rng=np.random.default_rng(0))
    >>> s.n_units, s.user_is_treated().reshape(3, 2).all(axis=1).sum() in (1, 2)
    (3, True)
    """
    check_rng(rng)
    cluster_of_user = np.asarray(cluster_of_user, dtype=np.int64)
    n_clusters = int(cluster_of_user.max()) + 1 if cluster_of_user.size else 0
    treated = draw_treated_units(n_clusters, share=share, randomization=randomization, rng=rng)
    probability = share
    if randomization == "complete" and n_clusters:
        probability = float(treated.sum()) / n_clusters
    return AssignmentSchedule(unit_of_user=cluster_of_user, is_treated=treated[:, None],
                              period_start_ticks=np.zeros(1, dtype=np.int64), n_ticks=n_ticks,
                              treated_probability=probability, unit_kind=unit_kind,
                              randomization=randomization, exposure_units=exposure_units)
