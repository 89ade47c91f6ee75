"""Check that the two reference programs agree within Monte Carlo error, paired by seed.

For a given seed both programs share the population and each replication's
treatment assignment and differ only in how arrivals are drawn, so each
replication gives one paired difference (naive - floor) per statistic. The
check prints, per program, the mean and SD of attempts, fulfilled, lost, fill
rate and treated - control, then each paired difference's mean, standard error
and t statistic, and ``z_att = (attempts - expected) / sqrt(expected)`` (a Poisson
count's standard score: mean near 0, SD near 1). It exits 1 when a paired
|t| or the |t| of a program's mean z_att exceeds ``--max-t`` (default 4).

Usage::

    python benchmarks/check_agreement.py --users 20000 --seeds 1 2 3 4 5 6 7 8 --reps 5
"""

from __future__ import annotations

import argparse
import math
import re
import statistics
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
KEYS = ("attempts", "fulfilled", "lost", "fill_rate", "diff_fulfilled", "z_att")


def _replications(program: str, users: int, seed: int, reps: int, days: int) -> list[dict]:
    out = subprocess.run([sys.executable, str(HERE / program), "--users", str(users),
                          "--seed", str(seed), "--reps", str(reps), "--days", str(days)],
                         capture_output=True, text=True, check=True).stdout
    rows = []
    for line in out.splitlines():
        if line.startswith("rep "):
            row = {k: float(v) for k, v in re.findall(r"(\w+)=([-+\d.e]+)", line)}
            row["fill_rate"] = row["fulfilled"] / row["attempts"]
            row["z_att"] = (row["attempts"] - row["expected_attempts"]) / \
                math.sqrt(row["expected_attempts"])
            rows.append(row)
    return rows


def _t(values: list[float]) -> tuple[float, float, float]:
    mean = statistics.fmean(values)
    se = statistics.stdev(values) / math.sqrt(len(values)) if len(values) > 1 else math.nan
    t = 0.0 if se == 0 and mean == 0 else (mean / se if se else math.inf)
    return mean, se, t


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--users", type=int, default=20000)
    parser.add_argument("--days", type=int, default=28)
    parser.add_argument("--seeds", type=int, nargs="+", default=[1, 2, 3, 4, 5, 6, 7, 8])
    parser.add_argument("--reps", type=int, default=5)
    parser.add_argument("--max-t", type=float, default=4.0)
    args = parser.parse_args()
    runs = {name: [] for name in ("naive_simpy", "floor_numpy")}
    for seed in args.seeds:
        for name in runs:
            runs[name] += _replications(f"{name}.py", args.users, seed, args.reps, args.days)
    print(f"{len(runs['floor_numpy'])} replications per program ({args.users} users, "
          f"{args.days} days)")
    for name, rows in runs.items():
        print(name + ": " + " ".join(
            f"{k}={statistics.fmean(r[k] for r in rows):.6g}"
            f"(sd {statistics.stdev(r[k] for r in rows):.4g})" for k in KEYS))
    worst = 0.0
    for key in KEYS[:-1]:
        mean, se, t = _t([a[key] - b[key] for a, b in
                          zip(runs["naive_simpy"], runs["floor_numpy"])])
        worst = max(worst, abs(t))
        print(f"paired naive - floor {key}: mean={mean:.6g} se={se:.4g} t={t:.2f}")
    for name, rows in runs.items():
        mean, se, t = _t([r["z_att"] for r in rows])
        worst = max(worst, abs(t))
        print(f"{name} z_att: mean={mean:.3f} sd={statistics.stdev(r['z_att'] for r in rows):.3f} "
              f"t={t:.2f}")
    agree = worst <= args.max_t
    print(f"agreement: {'yes' if agree else 'NO'} (largest |t| {worst:.2f}, limit {args.max_t})")
    return 0 if agree else 1


if __name__ == "__main__":
    sys.exit(main())
