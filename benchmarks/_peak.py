"""Run a command and print its wall time and peak resident memory (used by the benchmarks).

Usage: python _peak.py COMMAND [ARGS...]; prints the command's output, then a line
``peak: wall_s=<seconds> maxrss_mib=<MiB>``.
"""

import os
import subprocess
import sys
import time


def main() -> int:
    start = time.perf_counter()
    child = subprocess.Popen(sys.argv[1:])
    _, status, usage = os.wait4(child.pid, 0)
    wall = time.perf_counter() - start
    child.returncode = os.waitstatus_to_exitcode(status)
    print(f"peak: wall_s={wall:.4f} maxrss_mib={usage.ru_maxrss / 1024:.1f}", flush=True)
    return child.returncode


if __name__ == "__main__":
    sys.exit(main())
