"""Peak memory of the switchback's variance on a long per-pool switchback.

Usage::

    python benchmarks/switchback_variance_memory.py --days 365 3650 [--module FILE]

For each horizon, a child process (run under ``_peak.py``) builds a per-pool
switchback world of 4 pools with 6-hour blocks and a 3-hour burn-in (Poisson
orders, no market) and either stops there (``build``) or also runs
``switchback_difference`` (``estimate``); the difference of the two peaks is the
estimate's own memory. ``--module`` loads ``switchback_difference`` from another
file (e.g. a previous version saved with ``git show REV:src/spillgauge/estimators/switchback.py``),
so two versions are measured side by side in one run. The previous dense
variance held ``(B_a, B_a)`` float64 arrays (``B_a`` the blocks of an arm); the
line ``dense_gib`` prints what four of them take for the larger arm.
"""

from __future__ import annotations

import argparse
import importlib.util
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
N_POOLS, BLOCK_HOURS, BURN_IN_HOURS = 4, 6, 3


def _child(days: int, mode: str, module: str | None) -> None:
    import numpy as np

    from spillgauge.panel import OutcomePanel
    from spillgauge.schedule import AssignmentSchedule

    if module:
        spec = importlib.util.spec_from_file_location("switchback_under_test", module)
        loaded = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(loaded)
        estimate = loaded.switchback_difference
    else:
        from spillgauge.estimators import switchback_difference as estimate
    rng = np.random.default_rng(0)
    n_ticks = days * 24
    n_blocks = n_ticks // BLOCK_HOURS
    orders = rng.poisson(20.0, size=(N_POOLS, n_ticks))
    pool_of_user = np.repeat(np.arange(N_POOLS), 50)
    panel = OutcomePanel.from_arrays(
        fulfilled=np.zeros((pool_of_user.size, 1), dtype=np.int64), pool_of_user=pool_of_user,
        pool_fulfilled=orders, pool_demanded=orders, pool_lost=np.zeros_like(orders),
        pool_stock=np.zeros_like(orders))
    schedule = AssignmentSchedule(
        unit_of_user=pool_of_user, is_treated=rng.random((N_POOLS, n_blocks)) < 0.5,
        period_start_ticks=np.arange(n_blocks) * BLOCK_HOURS, n_ticks=n_ticks,
        treated_probability=0.5, unit_kind="pool", randomization="bernoulli")
    if mode == "estimate":
        result = estimate(panel, schedule, burn_in_ticks=BURN_IN_HOURS)
        print(f"se={result.standard_error:.6g} df={result.degrees_of_freedom:.6g}")


def _measure(days: int, mode: str, module: str | None) -> float:
    command = [sys.executable, str(HERE / "_peak.py"), sys.executable, __file__, "--child",
               str(days), mode] + (["--module", module] if module else [])
    output = subprocess.run(command, capture_output=True, text=True, check=True).stdout
    for line in output.splitlines():
        if line.startswith("se="):
            print(f"    {line}")
    peak = [line for line in output.splitlines() if line.startswith("peak:")][-1]
    return float(peak.split("maxrss_mib=")[1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--days", type=int, nargs="+", default=[365, 3650])
    parser.add_argument("--module", help="load switchback_difference from this file")
    parser.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        _child(int(args.child[0]), args.child[1], args.module)
        return
    for days in args.days:
        arm = N_POOLS * days * 24 // BLOCK_HOURS / 2
        arm += arm ** 0.5 * 2  # two binomial SDs above half
        build = _measure(days, "build", args.module)
        total = _measure(days, "estimate", args.module)
        print(f"days={days} blocks={N_POOLS * days * 24 // BLOCK_HOURS} build_mib={build:.0f} "
              f"estimate_mib={total:.0f} variance_mib={total - build:.0f} "
              f"dense_gib={4 * 8 * arm ** 2 / 2 ** 30:.1f}", flush=True)


if __name__ == "__main__":
    main()
