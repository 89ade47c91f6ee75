"""Real processes: a results folder is locked for the length of a run, and workers die with
the run that started them (SIGKILL or SIGTERM)."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from spillgauge.cli import main

pytest.importorskip("fcntl")

TINY = """name = "tiny"
[calendar]
days = 3
[users]
count = 120
[pools]
count = 4
[effect]
lift = 0.3
[study]
reps = 2
seed = 2
[[design]]
kind = "user"
"""

HOLD = ("import sys; from spillgauge.files import folder_lock\n"
        "with folder_lock(sys.argv[1]):\n"
        "    print('held', flush=True); sys.stdin.read()\n")


def _main(args, capsys):
    try:
        code = main([str(a) for a in args])
    except SystemExit as exc:
        code = exc.code
    return code, capsys.readouterr().err.strip()


@pytest.fixture
def tiny(tmp_path):
    path = tmp_path / "tiny.toml"
    path.write_text(TINY)
    return path


def test_a_held_folder_is_refused_naming_the_holder_until_the_holder_dies(tiny, tmp_path,
                                                                         capsys):
    out = tmp_path / "out"
    holder = subprocess.Popen([sys.executable, "-c", HOLD, str(out)], stdin=subprocess.PIPE,
                              stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        for args in (["run", tiny, "--reps", "1", "--workers", "1", "--out", out],
                     ["run", tiny, "--reps", "1", "--workers", "1", "--out", out, "--resume"],
                     ["sweep", tiny, "--vary", "effect.lift=0.1,0.2", "--reps", "1",
                      "--workers", "1", "--out", out]):
            code, err = _main(args, capsys)
            assert code == 2, err
            assert len(err.splitlines()) == 1 and "Traceback" not in err
            assert f"pid {holder.pid}, started " in err and str(out) in err
        assert not (out / "study.json").exists()  # nothing was written beside the holder
    finally:
        holder.kill()  # the OS releases the lock however its holder dies
        holder.wait()
    code, err = _main(["run", tiny, "--reps", "1", "--workers", "1", "--out", out], capsys)
    assert code == 0, err


def test_concurrent_runs_never_mix_two_studies(tiny, tmp_path):
    # Two runs with different seeds started together into one folder, twice: exactly
    # one finishes, the other is refused (by the lock, or by the folder's owner once the
    # first is done), and study.json and summary.json name the same seed.
    for trial in range(2):
        out = tmp_path / f"out{trial}"
        runs = [subprocess.Popen([sys.executable, "-m", "spillgauge", "run", str(tiny), "--reps",
                                  "3", "--workers", "1", "--quiet", "--seed", str(seed),
                                  "--out", str(out)], cwd=tmp_path, stdout=subprocess.DEVNULL,
                                 stderr=subprocess.PIPE, text=True) for seed in (11, 12)]
        results = [(run.wait(timeout=60), run.stderr.read()) for run in runs]
        assert sorted(code for code, _ in results) == [0, 2], results
        refused = next(err for code, err in results if code == 2)
        assert len(refused.strip().splitlines()) == 1 and "Traceback" not in refused
        study = json.loads((out / "study.json").read_text())
        summary = json.loads((out / "summary.json").read_text())
        winner = [11, 12][[code for code, _ in results].index(0)]
        assert study["seed"] == winner == summary["seed"], (study["seed"], summary.get("seed"))
