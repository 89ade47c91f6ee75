"""Run a short study and print its time and memory (used by replication_cost.py).

Usage: python _study_child.py SCENARIO REPS WORKERS

Builds the market first (kept in memory; forked workers inherit it), runs the
study, and prints ``study: build_s=... study_s=... reps=... workers=...
main_maxrss_mib=... worker_maxrss_mib=...`` (the largest worker's peak resident
memory, read once the workers have ended).
"""

from __future__ import annotations

import resource
import sys
import time

from spillgauge.market.build import build_market
from spillgauge.scenario.reading import load_scenario
from spillgauge.study.run import run_study


def main() -> None:
    path, reps, workers = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
    scenario = load_scenario(path)
    t0 = time.perf_counter()
    build_market(scenario, scenario.study.seed)
    build_s = time.perf_counter() - t0
    t0 = time.perf_counter()
    run_study(scenario, reps=reps, workers=workers)
    study_s = time.perf_counter() - t0
    own = resource.getrusage(resource.RUSAGE_SELF)
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu_s = own.ru_utime + own.ru_stime + children.ru_utime + children.ru_stime
    print(f"study: build_s={build_s:.3f} study_s={study_s:.3f} cpu_s={cpu_s:.3f} reps={reps} "
          f"workers={workers} main_maxrss_mib={own.ru_maxrss / 1024:.1f} "
          f"worker_maxrss_mib={children.ru_maxrss / 1024:.1f}", flush=True)


if __name__ == "__main__":
    main()
