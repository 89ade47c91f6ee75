"""A test of interference: half the clusters run a user-level experiment, half a cluster-level one."""

from __future__ import annotations

import numpy as np

from spillgauge.designs._draw import draw_treated_units
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["draw_interference_schedule"]


def draw_interference_schedule(cluster_of_user: np.ndarray, n_ticks: int, *,
                               share: float = 0.5, rng: np.random.Generator
                               ) -> AssignmentSchedule:
    """Draw the schedule of a test for interference (Saveski et al. 2017).

    The clusters are completely randomized into two halves. In the *user arm*
    every user is randomized on their own (complete randomization, ``share``
    treated); in the *cluster arm* whole clusters are (complete randomization of
    clusters). Without interference both halves estimate the same effect.

    Parameters
    ----------
    cluster_of_user : ndarray of int, shape (n_users,)
        Cluster labels ``0..n_clusters-1``; at least 4 clusters.
    n_ticks : int
    share : float
        Share treated within each half.
    rng : numpy.random.Generator

    Returns
    -------
    AssignmentSchedule
        Units are users; ``cluster_of_user`` and ``is_cluster_arm`` say which
        half each user's cluster is in.

    Examples
    --------
    >>> s = draw_interference_schedule(np.repeat(np.arange(4), 3), 24,
    ...                                rng=np.random.default_rng(0))
    >>> int(s.is_cluster_arm.sum()), s.n_units
    (2, 12)
    """
    check_rng(rng)
    cluster_of_user = np.asarray(cluster_of_user, dtype=np.int64)
    n_clusters = int(cluster_of_user.max()) + 1 if cluster_of_user.size else 0
    if n_clusters < 4:
        raise ValueError(f"a test of interference needs at least 4 clusters; got {n_clusters}")
    is_cluster_arm = draw_treated_units(n_clusters, share=0.5, randomization="complete", rng=rng)
    treated = np.zeros(cluster_of_user.size, dtype=bool)
    in_user_arm = np.flatnonzero(~is_cluster_arm[cluster_of_user])
    treated[in_user_arm] = draw_treated_units(in_user_arm.size, share=share,
                                              randomization="complete", rng=rng)
    arm_clusters = np.flatnonzero(is_cluster_arm)
    cluster_treated = np.zeros(n_clusters, dtype=bool)
    cluster_treated[arm_clusters] = draw_treated_units(arm_clusters.size, share=share,
                                                       randomization="complete", rng=rng)
    in_cluster_arm = is_cluster_arm[cluster_of_user]
    treated[in_cluster_arm] = cluster_treated[cluster_of_user[in_cluster_arm]]
    return AssignmentSchedule(unit_of_user=np.arange(cluster_of_user.size),
                              is_treated=treated[:, None],
                              period_start_ticks=np.zeros(1, dtype=np.int64), n_ticks=n_ticks,
                              treated_probability=share, unit_kind="user",
                              randomization="complete", cluster_of_user=cluster_of_user,
                              is_cluster_arm=is_cluster_arm)
