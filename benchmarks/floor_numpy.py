"""Reference program: the reference workload as a plain vectorized numpy loop over hours.

Each hour draws the hour's candidate arrivals of all users at once (their number
is Poisson with the sum of the users' peak rates; each is given to a user by a
binary search in the cumulative peak rates), keeps a candidate with probability
``m(t) / max m`` (thinning; Lewis & Shedler 1979), and serves the kept orders of
each pool in arrival order from its stock. Cost grows with the number of order
events, not users x hours. The model and the printed lines are described in
``reference_market.py``.

Usage::

    python benchmarks/floor_numpy.py --users 100000 --reps 3
"""

from __future__ import annotations

import time

START = time.perf_counter()  # total_wall_s counts from before numpy and networkx load

import numpy as np
import reference_market as ref

PEAK = 1.0 + ref.AMPLITUDE  # the diurnal multiplier's maximum


def simulate(workload: ref.Workload, treated: np.ndarray, rate: np.ndarray,
             rng: np.random.Generator) -> tuple[int, np.ndarray, int]:
    """Simulate one replication; return attempts, fulfilled per user and lost orders."""
    cumulative = np.cumsum(rate * PEAK)
    total = float(cumulative[-1])
    pool_of_user = workload.pool_of_user
    level = workload.order_up_to.copy()
    served_users = []
    attempts = lost = 0
    for hour in range(workload.horizon_hours):
        if hour % ref.DAY_HOURS == 0:
            level[:] = workload.order_up_to
        n = rng.poisson(total)
        users = np.minimum(np.searchsorted(cumulative, rng.random(n) * total, side="right"),
                           workload.n_users - 1)
        when = hour + rng.random(n)
        kept = rng.random(n) * PEAK < ref.diurnal(when)
        users, when = users[kept], when[kept]
        pools = pool_of_user[users]
        order = np.argsort(pools + (when - hour))  # by pool, then arrival time in the hour
        users, pools = users[order], pools[order]
        demand = np.bincount(pools, minlength=workload.n_pools)
        first = np.cumsum(demand) - demand
        is_served = np.arange(users.size) - first[pools] < level[pools]
        served_users.append(users[is_served])
        sold = np.minimum(demand, level)
        level -= sold
        attempts += int(users.size)
        lost += int(users.size - sold.sum())
    served = np.concatenate(served_users) if served_users else np.zeros(0, dtype=np.int64)
    return attempts, np.bincount(served, minlength=workload.n_users), lost


if __name__ == "__main__":
    ref.main(simulate, "The reference workload, vectorized hour by hour.", start=START)
