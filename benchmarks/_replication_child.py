"""Time one replication of a study against its candidate draw, in one process.

Usage: python _replication_child.py SCENARIO [--repeat K] [--profile FILE]

Builds the scenario's market once, then for each of ``repeat`` replications
times, alternately, the candidate draw alone (``draw_candidates`` on the
replication's demand stream) and the whole replication (``run_replication``:
design draws, the truth worlds and every design's world, estimates). The ratio
is the whole replication over the draw it made itself (timed inside it, so the
two are measured within the same second); ``ratio_standalone`` divides by the
separate draw instead. Prints ``replication: key=value ...`` with the medians. Times are the
process's CPU time (the work is single-threaded numpy), which a shared machine's
load disturbs much less than wall time.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

from spillgauge.market.build import build_market
from spillgauge.scenario.reading import load_scenario
from spillgauge.seeding import DEMAND, stream
from spillgauge.study.replication import run_replication
from spillgauge.worlds import engine
from spillgauge.worlds.engine import draw_candidates


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("scenario")
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    scenario = load_scenario(args.scenario)
    seed = scenario.study.seed
    t0 = time.perf_counter()
    market = build_market(scenario, seed)
    build_s = time.perf_counter() - t0
    inner = []  # CPU time of the draw inside each replication

    def timed_draw(*a, **k):
        start = time.process_time()
        events = draw_candidates(*a, **k)
        inner.append(time.process_time() - start)
        return events

    engine.draw_candidates = timed_draw  # simulate_worlds draws through the module's name
    run_replication(scenario, seed, 0, market=market, keep_traces=False)  # warm-up (imports)
    draws, reps, ratios, n_events = [], [], [], 0
    for r in range(1, args.repeat + 1):
        t0 = time.process_time()
        events = draw_candidates(market, rng=np.random.default_rng(stream(seed, r, DEMAND)))
        draws.append(time.process_time() - t0)
        n_events = events.n_events
        del events
        t0 = time.process_time()
        run_replication(scenario, seed, r, market=market, keep_traces=False)
        reps.append(time.process_time() - t0)
        ratios.append(reps[-1] / inner[-1])
    draw_s, rep_s = statistics.median(draws), statistics.median(reps)
    print(f"replication: users={market.n_users} worlds={2 + len(scenario.designs)} "
          f"build_s={build_s:.3f} candidates={n_events} draw_s={draw_s:.4f} "
          f"replication_s={rep_s:.4f} ratio={statistics.median(ratios):.3f} "
          f"ratio_standalone={rep_s / draw_s:.3f} "
          f"ns_per_candidate_draw={1e9 * draw_s / n_events:.1f} "
          f"ratios={','.join(f'{x:.3f}' for x in ratios)}", flush=True)


if __name__ == "__main__":
    main()
