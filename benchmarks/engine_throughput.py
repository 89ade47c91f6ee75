"""Benchmark: spillgauge's engine beside the two reference programs, in one run.

For each size it runs, alternating and repeated, in fresh processes: the two
reference programs kept beside this script, ``floor_numpy.py`` (plain vectorized
hour loop) and ``naive_simpy.py`` (one simpy process per user; skipped above
``--naive-max`` users), spillgauge's engine
with one world and with the three worlds of a replication, and the whole
``spillgauge truth`` command against ``floor_numpy.py --reps 2``. It prints
medians and the ratios the project's targets are stated in.

Usage (from the repository root)::

    python benchmarks/engine_throughput.py --sizes 20000 100000 --repeat 3
"""

from __future__ import annotations

import argparse
import re
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
SCENARIO = """name = "reference_workload_{users}"
description = "The reference workload of the shared benchmark programs."
[calendar]
days = {days}
diurnal_amplitude = 0.5
[users]
count = {users}
orders_per_week = 1.25   # Gamma(shape 2, mean 5 per 28 days)
rate_shape = 2.0
history_days = 0
[pools]
count = 50
restock_every_hours = 24
stock_cover = 0.9
[graph]
model = "small_world"
mean_degree = 10
rewire_share = 0.1
[effect]
lift = 0.2
peer_lift = 0.1
[study]
reps = 1
seed = 1
[[design]]
kind = "user"
randomization = "bernoulli"
"""


def _run(command: list[str]) -> dict:
    out = subprocess.run([sys.executable, str(HERE / "_peak.py"), *command],
                         capture_output=True, text=True, check=True).stdout
    values = dict(re.findall(r"(\w+)=([-+\w.]+)", " ".join(
        line for line in out.splitlines() if line.startswith(("peak:", "summary:", "engine:")))))
    return {k: float(v) for k, v in values.items() if re.fullmatch(r"[-+\d.e]+", v)}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[20000, 100000])
    parser.add_argument("--days", type=int, default=28)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--naive-max", type=int, default=100000)
    parser.add_argument("--bench-dir", default=str(HERE),
                        help="folder holding floor_numpy.py and naive_simpy.py (default: here)")
    args = parser.parse_args()
    bench = Path(args.bench_dir)
    floor, naive = str(bench / "floor_numpy.py"), str(bench / "naive_simpy.py")
    tmp = Path(tempfile.mkdtemp(prefix="spillgauge-bench-"))
    print(f"{'users':>9} {'program':<28} {'events/s/world':>15} {'wall s':>8} {'peak MiB':>9}")
    for users in args.sizes:
        scenario = tmp / f"workload_{users}.toml"
        scenario.write_text(SCENARIO.format(users=users, days=args.days))
        common = ["--users", str(users), "--days", str(args.days), "--quiet"]
        runs: dict[str, list[dict]] = {}
        python, child = sys.executable, str(HERE / "_engine_child.py")
        plan = [("floor_numpy", [python, floor, *common]),
                ("engine, 1 world", [python, child, str(scenario), "--worlds", "1"]),
                ("engine, 3 worlds", [python, child, str(scenario), "--worlds", "3"])]
        if users <= args.naive_max:
            plan.append(("naive_simpy", [python, naive, *common]))
        plan += [("floor_numpy --reps 2 (whole)", [python, floor, *common, "--reps", "2"]),
                 ("spillgauge truth (whole)", [python, "-m", "spillgauge", "truth",
                                               str(scenario), "--reps", "1", "--workers", "1",
                                               "--quiet"])]
        for _ in range(args.repeat):  # alternate the programs so machine drift hits all
            for name, command in plan:
                runs.setdefault(name, []).append(_run(command))
        med = {name: {k: statistics.median(r[k] for r in rs) for k in rs[0]}
               for name, rs in runs.items()}
        for name, m in med.items():
            rate = m.get("events_per_s_per_world", m.get("events_per_s", float("nan")))
            print(f"{users:>9} {name:<28} {rate:>15.4g} {m['wall_s']:>8.2f} "
                  f"{m['maxrss_mib']:>9.0f}")
        floor_rate = med["floor_numpy"]["events_per_s"]
        print(f"{users:>9} ratio engine(3 worlds)/floor events per s per world: "
              f"{med['engine, 3 worlds']['events_per_s_per_world'] / floor_rate:.2f}")
        print(f"{users:>9} ratio engine(1 world)/floor events per s: "
              f"{med['engine, 1 world']['events_per_s_per_world'] / floor_rate:.2f}")
        if "naive_simpy" in med:
            print(f"{users:>9} ratio floor/naive events per s: "
                  f"{floor_rate / med['naive_simpy']['events_per_s']:.1f}")
        print(f"{users:>9} ratio whole process spillgauge truth / floor_numpy --reps 2: "
              f"{med['spillgauge truth (whole)']['wall_s'] / med['floor_numpy --reps 2 (whole)']['wall_s']:.2f}",
              flush=True)


if __name__ == "__main__":
    main()
