"""Benchmark: a full study's wall time and peak memory as users x replications grow.

Runs the study (truth + the supply-constrained scenario's designs) in fresh
processes on ``tight_pantry`` scaled to several sizes, and prints the whole
process's wall time and peak memory (main process), the study's own time, and
that time per (1000 users x replication): a flat last column means the study
grows linearly in users x replications.

Usage (from the repository root)::

    python benchmarks/study_scaling.py --workers 2
"""

from __future__ import annotations

import argparse
import re
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--grid", nargs="+", default=["3000x100", "6000x100", "12000x100",
                                                      "24000x100", "6000x50", "6000x200"],
                        help="USERSxREPS points")
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    from spillgauge.bundled import find_scenario

    base = find_scenario("tight_pantry").read_text()
    tmp = Path(tempfile.mkdtemp(prefix="spillgauge-study-"))
    print(f"{'users':>8} {'reps':>5} {'wall s':>8} {'study s':>8} {'peak MiB':>9} "
          f"{'study ms per 1000 user-reps':>22}")
    for point in args.grid:
        users, reps = (int(x) for x in point.split("x"))
        text = re.sub(r"(?m)^count = 6000$", f"count = {users}", base)
        text = re.sub(r'(?m)^name = "tight_pantry"$', f'name = "tight_pantry_{users}"', text)
        path = tmp / f"s_{users}.toml"
        path.write_text(text)
        child = ("import sys, time; from spillgauge import load_scenario, run_study; "
                 "s = load_scenario(sys.argv[1]); t = time.perf_counter(); "
                 "run_study(s, reps=int(sys.argv[2]), workers=int(sys.argv[3])); "
                 "print(f'study: study_s={time.perf_counter() - t:.4f}')")
        out = subprocess.run([sys.executable, str(HERE / "_peak.py"), sys.executable, "-c",
                              child, str(path), str(reps), str(args.workers)],
                             capture_output=True, text=True, check=True).stdout
        study_s = float(re.search(r"study_s=([\d.]+)", out).group(1))
        peak = dict(re.findall(r"(\w+)=([\d.]+)", out.splitlines()[-1]))
        wall = float(peak["wall_s"])
        print(f"{users:>8} {reps:>5} {wall:>8.2f} {study_s:>8.2f} "
              f"{float(peak['maxrss_mib']):>9.0f} {1000 * study_s / (users * reps / 1000):>22.2f}",
              flush=True)


if __name__ == "__main__":
    main()
