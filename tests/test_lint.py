"""The tree passes the linter configured in pyproject.toml ([tool.ruff])."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_finds_nothing():
    # ruff comes with the test extras; run it as installed beside this Python.
    ruff = shutil.which("ruff", path=str(Path(sys.executable).parent)) or shutil.which("ruff")
    if ruff is None:
        pytest.skip("ruff is not installed (pip install -e '.[test]' brings it)")
    done = subprocess.run([ruff, "check", "--no-cache", "src", "tests", "benchmarks"], cwd=ROOT,
                          capture_output=True, text=True, timeout=120, check=False)
    assert done.returncode == 0, done.stdout + done.stderr
