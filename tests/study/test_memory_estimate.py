"""The memory estimate against a measured peak over a long horizon, and the replications it
counts."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

from spillgauge.scenario.reading import load_scenario, parse_scenario
from spillgauge.study.resources import estimate_memory_bytes

PEAK = Path(__file__).resolve().parents[2] / "benchmarks" / "_peak.py"

LONG = """name = "long"
[calendar]
days = 1000
[users]
count = 300
[pools]
count = 4
[study]
reps = 2
seed = 3
[[design]]
kind = "user"
[[design]]
kind = "switchback"
per = "pool"
block_hours = 24
"""


@pytest.mark.skipif(not Path("/proc/self/stat").exists() or not PEAK.exists(),
                    reason="measures with benchmarks/_peak.py (Linux)")
def test_estimate_covers_the_measured_peak_of_a_long_horizon(tmp_path):
    # The per-pool tick tables, the first replication's traces and a switchback's CR2 Gram
    # matrices (4,000 pool-days here) grow with the horizon; the estimate errs high, but
    # within a factor 2 (common practice, no source).
    path = tmp_path / "long.toml"
    path.write_text(LONG)
    estimate = estimate_memory_bytes(load_scenario(path)) / 2**20
    run = subprocess.run([sys.executable, str(PEAK), sys.executable, "-m", "spillgauge", "run",
                          str(path), "--workers", "1", "--quiet", "--out", str(tmp_path / "o")],
                         capture_output=True, text=True, timeout=120, cwd=tmp_path)
    assert run.returncode == 0, run.stderr
    measured = float(re.search(r"maxrss_mib=([0-9.]+)", run.stdout).group(1))
    assert measured <= estimate <= 2 * measured, (estimate, measured)


def test_replications_are_counted():
    base = {"name": "r", "calendar": {"days": 2}, "users": {"count": 100},
            "design": [{"kind": "user"}]}
    few = estimate_memory_bytes(parse_scenario({**base, "study": {"reps": 10}}))
    many = estimate_memory_bytes(parse_scenario({**base, "study": {"reps": 1_000_000}}))
    # each replication's records stay in memory until the summary: at least 2 kB each
    assert many - few >= (1_000_000 - 10) * 2048
