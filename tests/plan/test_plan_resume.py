"""`spillgauge plan --resume`: a plan saves each replication and continues after a kill.

The reference is the same plan run without interruption: a resumed plan must give
plan.csv and plan.json byte for byte (the invariance STYLE.md section 8 asks of a
study: adding or resuming replications leaves the others unchanged).
"""

from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import time

import pytest

from spillgauge.cli import main
from spillgauge.plan.replication import PlanReplication, PrefixRun
from spillgauge.plan.store import plan_from_record, plan_record
from spillgauge.statistics.truth import ReplicationTruth
from tests.conftest import TINY

ARGS = ["--days", "1,3", "--reps", "6", "--workers", "1", "--quiet"]


def _main(args, capsys):
    try:
        code = main([str(a) for a in args])
    except SystemExit as exc:
        code = exc.code
    return code, capsys.readouterr().err.strip()


def _plan(tmp_path, capsys, name: str, *extra) -> tuple[int, str]:
    scenario = tmp_path / "tiny.toml"
    if not scenario.exists():
        scenario.write_text(TINY)
    return _main(["plan", scenario, *ARGS, "--out", tmp_path / name, *extra], capsys)


def test_a_record_keeps_every_number_exactly():
    truth = ReplicationTruth(gte=0.1 + 0.2, control_mean=1 / 3, treated_mean=math.nan,
                             control_demanded=2.0, treated_demanded=1e-300,
                             control_fill_rate=1.0, treated_fill_rate=0.5)
    result = PlanReplication(
        replication=3, n_users=10, truths={7: truth},
        runs={"user": {7: PrefixRun(0.1, math.nan, -math.inf, math.inf, math.inf, 10, "n")}},
        history_correlation={7: math.nan}, strata_within_share={7: {"pools": 2 / 3}})
    back = plan_from_record(json.loads(json.dumps(plan_record(result))))
    run = back.runs["user"][7]
    assert (run.point, run.ci_low, run.ci_high, run.degrees_of_freedom, run.note) == \
        (0.1, -math.inf, math.inf, math.inf, "n")
    assert math.isnan(run.standard_error) and math.isnan(back.history_correlation[7])
    assert back.truths[7].gte == 0.1 + 0.2 and back.truths[7].treated_demanded == 1e-300
    assert back.strata_within_share == {7: {"pools": 2 / 3}}


def test_a_resumed_plan_equals_one_never_interrupted(tmp_path, capsys):
    assert _plan(tmp_path, capsys, "whole")[0] == 0
    assert _plan(tmp_path, capsys, "cut")[0] == 0
    log = tmp_path / "cut" / "plan_replications.jsonl"
    lines = log.read_text().splitlines(keepends=True)
    assert len(lines) == 6
    # as a kill leaves it: two replications saved and a torn third line
    log.write_text("".join(lines[:2]) + lines[2][: len(lines[2]) // 2])
    (tmp_path / "cut" / "plan.json").unlink()
    assert _plan(tmp_path, capsys, "cut", "--resume")[0] == 0
    for name in ("plan.csv", "plan.json"):
        assert (tmp_path / "cut" / name).read_bytes() == (tmp_path / "whole" / name).read_bytes()
    assert len(log.read_text().splitlines()) == 6


def test_resume_refuses_another_plan_and_a_stray_line_by_name(tmp_path, capsys):
    assert _plan(tmp_path, capsys, "p")[0] == 0
    scenario = tmp_path / "tiny.toml"
    code, err = _main(["plan", scenario, "--days", "2,3", "--reps", "6", "--workers", "1",
                       "--quiet", "--out", tmp_path / "p", "--resume"], capsys)
    assert code == 2 and "days" in err and len(err.splitlines()) == 1
    code, err = _main(["plan", scenario, *ARGS, "--seed", "9", "--out", tmp_path / "p",
                       "--resume"], capsys)
    assert code == 2 and "seed 9" in err
    log = tmp_path / "p" / "plan_replications.jsonl"
    log.write_text(log.read_text() + '{"replication": 1}\n')
    code, err = _main(["plan", scenario, *ARGS, "--out", tmp_path / "p", "--resume"], capsys)
    assert code == 2 and "line 7" in err
    # without --resume a plan starts afresh in its folder, as it always did
    assert _plan(tmp_path, capsys, "p")[0] == 0


def test_resume_needs_a_folder():
    from spillgauge.errors import ScenarioError
    from spillgauge.plan import plan_study
    from tests.conftest import make_scenario

    scenario = make_scenario(users={"count": 100}, design=[{"kind": "user"}])
    with pytest.raises(ScenarioError, match="--resume"):
        plan_study(scenario, reps=2, resume=True)


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs SIGKILL")
def test_a_killed_plan_resumes_to_the_same_numbers(tmp_path, capsys):
    scenario = tmp_path / "slow.toml"
    scenario.write_text(TINY.replace("count = 120", "count = 1500"))
    args = ["plan", str(scenario), "--days", "1,3", "--reps", "120", "--workers", "1",
            "--quiet"]
    assert _main([*args, "--out", tmp_path / "whole"], capsys)[0] == 0
    out = tmp_path / "cut"
    log = out / "plan_replications.jsonl"
    run = subprocess.Popen([sys.executable, "-m", "spillgauge", *args, "--out", str(out)],
                           cwd=tmp_path, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and run.poll() is None and (
                not log.exists() or len(log.read_text().splitlines()) < 3):
            time.sleep(0.05)
        assert run.poll() is None, "the plan finished before it could be killed"
        os.kill(run.pid, signal.SIGKILL)
    finally:
        run.wait()
    saved = len(log.read_text().splitlines())
    assert 3 <= saved < 120
    assert _main([*args, "--out", out, "--resume"], capsys)[0] == 0
    for name in ("plan.csv", "plan.json"):
        assert (out / name).read_bytes() == (tmp_path / "whole" / name).read_bytes()
