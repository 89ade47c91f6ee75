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
