"""Time spillgauge's engine on the reference workload (one process per measurement).

Prints ``engine: key=value ...`` with order events per second per world, for one
world alone and for the worlds of one replication simulated together.
"""

import argparse
import time

import numpy as np

from spillgauge.designs import draw_user_schedule
from spillgauge.market.build import build_market
from spillgauge.scenario.reading import load_scenario
from spillgauge.schedule import AssignmentSchedule
from spillgauge.worlds.engine import draw_candidates, simulate_worlds


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("scenario")
    parser.add_argument("--reps", type=int, default=1)
    parser.add_argument("--worlds", type=int, default=3, help="worlds per replication")
    parser.add_argument("--user-days", action="store_true",
                        help="keep each user's orders per day (the study keeps totals only)")
    args = parser.parse_args()
    scenario = load_scenario(args.scenario)
    t0 = time.perf_counter()
    market = build_market(scenario)
    build_s = time.perf_counter() - t0
    n, n_ticks = market.n_users, scenario.calendar.n_ticks
    fixed = [AssignmentSchedule.fixed(n_users=n, n_ticks=n_ticks, is_treated=b)
             for b in (False, True)]
    attempts = 0
    sim_s = 0.0
    candidates = 0
    for r in range(args.reps):
        design = draw_user_schedule(n, n_ticks, randomization="bernoulli",
                                    rng=np.random.default_rng([1, r]))
        schedules = ([design] + fixed)[:args.worlds]
        t0 = time.perf_counter()
        rng = np.random.default_rng([2, r])
        events = draw_candidates(market, rng=rng)
        panels = simulate_worlds(market, schedules, rng=rng, events=events,
                                 user_days=args.user_days)
        sim_s += time.perf_counter() - t0
        candidates += events.n_events
        attempts += sum(int(p.pool_demanded.sum()) for p in panels)
    per_world = attempts / args.reps / len(schedules)
    print(f"engine: users={n} worlds={len(schedules)} reps={args.reps} build_s={build_s:.3f} "
          f"sim_s={sim_s:.3f} attempts_per_world={per_world:.0f} "
          f"candidates_per_rep={candidates / args.reps:.0f} "
          f"events_per_s_per_world={attempts / sim_s:.4g}", flush=True)


if __name__ == "__main__":
    main()
