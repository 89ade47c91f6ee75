"""The benchmarks' reference programs run from a clone and agree with each other."""

import subprocess
import sys
from pathlib import Path

BENCHMARKS = Path(__file__).resolve().parent.parent / "benchmarks"


def test_reference_programs_agree_within_monte_carlo_error():
    # Both programs simulate the same model on the same population and assignments
    # and differ only in how arrivals are drawn, so paired differences (naive - floor)
    # of attempts, fulfilled, lost, fill rate and treated - control must be within
    # 4 standard errors of 0, and attempts within 4 SE of their exact Poisson mean
    # (sum of rates x hours; the diurnal factor averages 1 over whole days).
    run = subprocess.run([sys.executable, str(BENCHMARKS / "check_agreement.py"),
                          "--users", "1500", "--days", "14", "--seeds", "1", "2",
                          "--reps", "5"], check=False, capture_output=True, text=True)
    assert run.returncode == 0, run.stdout + run.stderr
    assert "agreement: yes" in run.stdout
    assert "10 replications per program" in run.stdout


def test_replication_cost_prints_its_ratios_and_the_load_from_a_clone():
    # The benchmark of docs/performance.md runs from the repository alone, on a small
    # market here: the replication over its draw, the reference program's figures and
    # the load average beside them (figures are not checked: speed is not tested).
    run = subprocess.run([sys.executable, str(BENCHMARKS / "replication_cost.py"),
                          "--sizes", "3000", "--repeat", "1", "--reps-per-process", "1"],
                         check=False, capture_output=True, text=True)
    assert run.returncode == 0, run.stdout + run.stderr
    assert "load average" in run.stdout
    assert "ratio replication / draw" in run.stdout
    assert "floor_numpy (reference workload, 1 world)" in run.stdout
