"""Same seed, same bits whatever runs the replications; finished work survives a kill."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import pytest

from spillgauge.errors import MemoryLimitError
from spillgauge.scenario.reading import parse_scenario
from spillgauge.study.resources import check_memory, estimate_memory_bytes
from spillgauge.study.run import run_study

TINY = {"name": "scale", "calendar": {"days": 7}, "users": {"count": 500},
        "pools": {"count": 5, "stock_cover": 1.1},
        "graph": {"model": "pool_blocks", "mean_degree": 4},
        "effect": {"lift": 0.3, "peer_lift": 0.2, "carryover_half_life_hours": 2},
        "study": {"reps": 6, "seed": 13},
        "design": [{"kind": "user"}, {"kind": "cluster"},
                   {"kind": "switchback", "block_hours": 12, "burn_in_hours": 2}]}


def _core(summary: dict) -> dict:
    return {k: summary[k] for k in ("truth", "designs", "recommendation", "reps", "seed")}


@pytest.fixture(scope="module")
def serial():
    return run_study(parse_scenario(TINY), workers=1)


def test_processes_give_the_same_bits(serial):
    pooled = run_study(parse_scenario(TINY), workers=2)
    assert _core(pooled.summary()) == _core(serial.summary())


def test_adding_replications_leaves_earlier_ones_unchanged(serial):
    more = run_study(parse_scenario(TINY), reps=8, workers=1)
    first = more.replications_frame().query("replication < 6").reset_index(drop=True)
    assert first.equals(serial.replications_frame())


def test_dask_local_cluster_gives_the_same_bits(serial):
    distributed = pytest.importorskip("dask.distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None) as cluster:
        result = run_study(parse_scenario(TINY), scheduler=cluster.scheduler_address)
    assert _core(result.summary()) == _core(serial.summary())


def test_resume_after_sigkill_matches_an_uninterrupted_run(tmp_path):
    scenario = dict(TINY, study={"reps": 30, "seed": 13})
    path = tmp_path / "scale.toml"
    lines = ['name = "scale"']
    for section in ("calendar", "users", "pools", "graph", "effect", "study"):
        lines.append(f"[{section}]")
        lines += [f"{k} = {json.dumps(v)}" for k, v in scenario[section].items()]
    for design in scenario["design"]:
        lines.append("[[design]]")
        lines += [f"{k} = {json.dumps(v)}" for k, v in design.items()]
    path.write_text("\n".join(lines) + "\n")
    out = tmp_path / "run"
    command = [sys.executable, "-m", "spillgauge", "run", str(path), "--out", str(out),
               "--workers", "1", "--quiet"]
    child = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    log = out / "replications.jsonl"
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        if log.exists() and log.read_text().count("\n") >= 5:
            break
        time.sleep(0.05)
    os.kill(child.pid, signal.SIGKILL)
    child.wait()
    saved = log.read_text().count("\n")
    assert 5 <= saved < 30, "the run should have been killed part way"
    assert not (out / "summary.json").exists()
    resumed = subprocess.run(command + ["--resume"], capture_output=True, text=True)
    assert resumed.returncode == 0, resumed.stderr
    whole = tmp_path / "whole"
    fresh = subprocess.run([*command[:6], str(whole), *command[7:]], capture_output=True,
                           text=True)
    assert fresh.returncode == 0, fresh.stderr
    a = json.loads((out / "summary.json").read_text())
    b = json.loads((whole / "summary.json").read_text())
    assert _core(a) == _core(b)
    assert (out / "replications.csv").read_text() == (whole / "replications.csv").read_text()


def test_memory_estimate_refuses_a_run_that_cannot_fit():
    big = parse_scenario(dict(TINY, users={"count": 5_000_000}, pools={"count": 50}))
    need = estimate_memory_bytes(big, workers=4)
    assert need > 4 * estimate_memory_bytes(parse_scenario(TINY))
    with pytest.raises(MemoryLimitError, match=r"needs about .* GiB .* fewer --workers"):
        check_memory(big, workers=4, available=2**30)
    assert check_memory(parse_scenario(TINY), available=2**40) > 0


def test_resume_refuses_changed_data_files(tmp_path):
    from spillgauge.errors import ResultsError

    users = tmp_path / "users.csv"
    users.write_text("user_id,pool_id,orders_per_week\n" + "".join(
        f"u{i},p{i % 3},2\n" for i in range(60)))
    scenario = parse_scenario({"name": "files", "users": {"file": str(users)},
                               "calendar": {"days": 3}, "study": {"reps": 2},
                               "design": [{"kind": "user"}]}, base_dir=tmp_path)
    out = tmp_path / "run"
    run_study(scenario, out=out)
    users.write_text(users.read_text().replace("u0,p0,2", "u0,p0,9"))
    changed = parse_scenario({"name": "files", "users": {"file": str(users)},
                              "calendar": {"days": 3}, "study": {"reps": 2},
                              "design": [{"kind": "user"}]}, base_dir=tmp_path)
    with pytest.raises(ResultsError, match=r"users\.file differs"):
        run_study(changed, out=out, resume=True)


def test_replication_is_the_same_with_or_without_daily_tables():
    # Keeping each user's orders per day is a declared need, not a change of numbers: the
    # study's estimates and truth are bit for bit the same either way.
    from spillgauge.bundled import find_scenario
    from spillgauge.scenario.reading import load_scenario
    from spillgauge.study.replication import result_to_record, run_replication

    scenario = load_scenario(find_scenario("tight_pantry"))
    lean = run_replication(scenario, 3, 1)
    full = run_replication(scenario, 3, 1, user_days=True)
    assert result_to_record(lean) == result_to_record(full)
