"""Reference program: the reference workload with one simpy process per user.

Every user is a simpy process that waits exponential gaps at its peak rate
(its rate times the diurnal maximum) and keeps an arrival with probability
``m(t) / max m`` (thinning; Lewis & Shedler 1979); a kept order takes one unit
from its home pool's ``simpy.Container`` or is lost when the pool is empty. One
process per pool refills its container at hour 0 of every day. All per-event
logic is plain Python. The model and the printed lines are described in
``reference_market.py``.

Usage::

    python benchmarks/naive_simpy.py --users 20000
"""

from __future__ import annotations

import time

START = time.perf_counter()  # total_wall_s counts from before numpy and networkx load

import numpy as np
import reference_market as ref
import simpy

PEAK = 1.0 + ref.AMPLITUDE


def simulate(workload: ref.Workload, treated: np.ndarray, rate: np.ndarray,
             rng: np.random.Generator) -> tuple[int, np.ndarray, int]:
    """Simulate one replication; return attempts, fulfilled per user and lost orders."""
    env = simpy.Environment()
    horizon = float(workload.horizon_hours)
    stock = [simpy.Container(env, init=int(s), capacity=max(int(s), 1))
             for s in workload.order_up_to]
    fulfilled = [0] * workload.n_users
    counts = {"attempts": 0, "lost": 0}

    def restock(container: simpy.Container, order_up_to: int):
        while True:
            yield env.timeout(ref.DAY_HOURS)
            if container.level < order_up_to:
                yield container.put(order_up_to - container.level)

    def shopper(user: int, peak_rate: float, container: simpy.Container):
        mean_gap = 1.0 / peak_rate
        while True:
            yield env.timeout(rng.exponential(mean_gap))
            if env.now >= horizon:
                return
            if rng.random() * PEAK < ref.diurnal(float(env.now)):
                counts["attempts"] += 1
                if container.level >= 1:
                    yield container.get(1)
                    fulfilled[user] += 1
                else:
                    counts["lost"] += 1

    for container, order_up_to in zip(stock, workload.order_up_to.tolist()):
        env.process(restock(container, order_up_to))
    pool_of_user = workload.pool_of_user.tolist()
    for user, peak_rate in enumerate((rate * PEAK).tolist()):
        env.process(shopper(user, peak_rate, stock[pool_of_user[user]]))
    env.run(until=horizon)
    return counts["attempts"], np.array(fulfilled), counts["lost"]


if __name__ == "__main__":
    ref.main(simulate, "The reference workload, one simpy process per user.", start=START)
