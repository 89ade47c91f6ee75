"""Benchmark: a replication's cost against its candidate draw, and a large study's time and memory.

For each size, ``tight_pantry`` (the truth worlds plus five designs: seven worlds)
scaled to that many users runs in fresh processes, alternating with the
reference program ``floor_numpy.py`` on the reference workload of the same size:

- ``_replication_child.py`` times, in one process and alternately, the candidate
  draw alone and the whole replication (design draws, seven worlds, estimates) on
  the same demand streams, and prints their medians and ratio (CPU time of the
  process; the work is single-threaded numpy);
- ``floor_numpy.py`` gives the plain vectorized reference's figures from the same run.

With ``--compare-src DIR`` the replication child also runs, alternately, on the
``src`` folder of another copy of spillgauge (e.g. the main branch's worktree:
the code before a change), and the before / after ratio of replication CPU time
is printed from the same run.

With ``--study USERS`` it then runs a ``--study-reps``-replication study of that
size on ``--workers`` processes and extrapolates it to 200 replications: market
build + 200 / reps x the study's wall time, and market build + 200 / reps x the
CPU time of all its processes / workers (what the wall time would be if the
cores were the study's alone; each worker's first replication, which pays for
its memory, is counted in full, so this overstates a long study), with the
largest worker's peak memory.

The machine's load average is printed beside each measurement: on a shared
machine wall times grow with it, CPU times much less.

Usage (from the repository root)::

    python benchmarks/replication_cost.py --sizes 100000 1000000 --repeat 3
    python benchmarks/replication_cost.py --sizes --study 1000000 --study-reps 10
    python benchmarks/replication_cost.py --sizes 100000 --compare-src ../main/src
"""

from __future__ import annotations

import argparse
import os
import re
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent


def _values(out: str, prefix: str) -> dict:
    line = " ".join(x for x in out.splitlines() if x.startswith(prefix))
    return {k: float(v) for k, v in re.findall(r"(\w+)=([-+\d.e]+)", line)}


def _run(command: list[str], src: str | None = None) -> str:
    env = None if src is None else {**os.environ, "PYTHONPATH": str(Path(src).resolve())}
    return subprocess.run([sys.executable, str(HERE / "_peak.py"), *command],
                          capture_output=True, text=True, check=True, env=env).stdout


def _load() -> str:
    return "load average " + " / ".join(f"{x:.1f}" for x in os.getloadavg())


def _scenario(users: int, folder: Path) -> Path:
    from spillgauge.bundled import find_scenario

    text = find_scenario("tight_pantry").read_text()
    text = re.sub(r"(?m)^count = 6000$", f"count = {users}", text)
    text = re.sub(r'(?m)^name = "tight_pantry"$', f'name = "tight_pantry_{users}"', text)
    path = folder / f"tight_pantry_{users}.toml"
    path.write_text(text)
    return path


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="*", default=[100000, 1000000])
    parser.add_argument("--repeat", type=int, default=3, help="fresh processes per program")
    parser.add_argument("--reps-per-process", type=int, default=3)
    parser.add_argument("--study", type=int, default=0, help="users of the study to time")
    parser.add_argument("--study-reps", type=int, default=5)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--compare-src", default=None,
                        help="another copy's src folder to time beside this one")
    args = parser.parse_args()
    print(f"{_load()} (1, 5, 15 min) on {os.cpu_count()} cores at start", flush=True)
    tmp = Path(tempfile.mkdtemp(prefix="spillgauge-replication-"))
    python = sys.executable
    for users in args.sizes:
        scenario = _scenario(users, tmp)
        child = [python, str(HERE / "_replication_child.py"), str(scenario),
                 "--repeat", str(args.reps_per_process)]
        floor = [python, str(HERE / "floor_numpy.py"), "--users", str(users), "--quiet"]
        ours, theirs, before = [], [], []
        for _ in range(args.repeat):  # alternate so machine drift hits both
            out = _run(child)
            ours.append({**_values(out, "replication:"), **_values(out, "peak:")})
            if args.compare_src:
                out = _run(child, args.compare_src)
                before.append({**_values(out, "replication:"), **_values(out, "peak:")})
            out = _run(floor)
            theirs.append({**_values(out, "summary:"), **_values(out, "peak:")})
        med = {k: statistics.median(r[k] for r in ours) for k in ours[0]}
        ref = {k: statistics.median(r[k] for r in theirs) for k in theirs[0]}
        per_run = ", ".join(f"{r['ratio']:.3f}" for r in ours)
        print(f"{users:>9} users: candidates {med['candidates']:.0f}, draw {med['draw_s']:.3f} s "
              f"({med['ns_per_candidate_draw']:.0f} ns each), replication of 7 worlds "
              f"{med['replication_s']:.3f} s, ratio replication / draw {med['ratio']:.3f} "
              f"(per run: {per_run}), "
              f"peak {med['maxrss_mib']:.0f} MiB (CPU s; {_load()})", flush=True)
        if before:
            old = {k: statistics.median(r[k] for r in before) for k in before[0]}
            old_runs = ", ".join(f"{r['ratio']:.3f}" for r in before)
            pairs = ", ".join(f"{b['replication_s'] / a['replication_s']:.2f}"
                              for a, b in zip(ours, before))
            print(f"{users:>9} users: before ({args.compare_src}): draw {old['draw_s']:.3f} s, "
                  f"replication {old['replication_s']:.3f} s, ratio replication / draw "
                  f"{old['ratio']:.3f} (per run: {old_runs}), peak {old['maxrss_mib']:.0f} MiB; "
                  f"replication before / after {old['replication_s'] / med['replication_s']:.2f} "
                  f"(per pair: {pairs})", flush=True)
        print(f"{users:>9} users: floor_numpy (reference workload, 1 world) sim "
              f"{ref['sim_s']:.3f} s, {ref['events_per_s'] / 1e6:.3g} M events/s, "
              f"attempts {ref['attempts_per_rep']:.0f}, "
              f"whole process {ref['wall_s']:.2f} s, peak {ref['maxrss_mib']:.0f} MiB", flush=True)
    if args.study:
        scenario = _scenario(args.study, tmp)
        out = _run([python, str(HERE / "_study_child.py"), str(scenario), str(args.study_reps),
                    str(args.workers)])
        study = _values(out, "study:")
        per_rep = study["study_s"] / args.study_reps
        projected = study["build_s"] + 200 * per_rep
        cpu_per_rep = study["cpu_s"] / args.study_reps
        alone = study["build_s"] + 200 * cpu_per_rep / args.workers
        print(f"study of {args.study} users, {args.study_reps} replications, 5 designs, "
              f"{args.workers} workers: {study['study_s']:.1f} s after a {study['build_s']:.1f} s "
              f"market build; {per_rep:.1f} s per replication (CPU {cpu_per_rep:.1f} s); "
              f"200 replications ~ {projected / 60:.1f} min wall at this load "
              f"({alone / 60:.1f} min if the {args.workers} cores were the study's alone; "
              f"target 15); peak memory: largest worker "
              f"{study['worker_maxrss_mib']:.0f} MiB, main {study['main_maxrss_mib']:.0f} MiB "
              f"(target 4096); {_load()}", flush=True)


if __name__ == "__main__":
    main()
