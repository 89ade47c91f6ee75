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
from tests.conftest import TINY

pytest.importorskip("fcntl")


HOLD = ("import sys; from spillgauge.files import folder_lock\n"
        "with folder_lock(sys.argv[1]):\n"
        "    print('held', flush=True); sys.stdin.read()\n")


def _main(args, capsys):
    try:
        code = main([str(a) for a in args])
    except SystemExit as exc:
        code = exc.code
    return code, capsys.readouterr().err.strip()


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


def _children(pid: int) -> list[int]:
    """Return the processes whose parent is ``pid`` (read from /proc)."""
    found = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except (OSError, IndexError):
            continue
        if int(fields[1]) == pid:
            found.append(int(stat.parent.name))
    return found


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (OSError, IndexError):
        return False
    return state != "Z"


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="reads /proc")
@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM])
def test_workers_die_with_a_killed_run(tmp_path, sig):
    scenario = tmp_path / "slow.toml"
    scenario.write_text(TINY.replace("count = 120", "count = 3000").replace("days = 3",
                                                                          "days = 28"))
    out = tmp_path / "out"
    run = subprocess.Popen([sys.executable, "-m", "spillgauge", "run", str(scenario), "--reps",
                            "400", "--workers", "2", "--quiet", "--out", str(out)],
                           cwd=tmp_path, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    workers: list[int] = []
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and run.poll() is None and len(workers) < 2:
            workers = _children(run.pid)
            time.sleep(0.1)
        assert len(workers) == 2, "the run did not start its two workers"
        os.kill(run.pid, sig)
        run.wait(timeout=10)
        deadline = time.monotonic() + 5
        while time.monotonic() < deadline and any(map(_alive, workers)):
            time.sleep(0.1)
        assert not [pid for pid in workers if _alive(pid)], "orphaned workers"
    finally:
        for pid in {run.pid, *workers, *_children(run.pid)}:
            try:
                os.kill(pid, signal.SIGKILL)
            except OSError:
                pass
        run.wait()


def _records(out: Path) -> list[dict]:
    return [json.loads(line) for line in (out / "replications.jsonl").read_text().splitlines()]


def _write_records(out: Path, records: list[dict]) -> None:
    (out / "replications.jsonl").write_text("".join(json.dumps(r) + "\n" for r in records))


def _resume_and_report_refuse(tiny, out, capsys, *, reps="3", seed="2"):
    errors = []
    for args in (["report", out], ["run", tiny, "--reps", reps, "--seed", seed, "--workers",
                                   "1", "--out", out, "--resume"]):
        code, err = _main(args, capsys)
        assert code == 2 and len(err.splitlines()) == 1 and "Traceback" not in err, err
        errors.append(err)
    return errors


@pytest.fixture
def two_studies(tiny, tmp_path, capsys):
    """Two finished 3-replication folders of the same scenario with seeds 2 and 5."""
    mine, other = tmp_path / "mine", tmp_path / "other"
    for out, seed in ((mine, "2"), (other, "5")):
        code, err = _main(["run", tiny, "--reps", "3", "--seed", seed, "--workers", "1",
                           "--out", out], capsys)
        assert code == 0, err
    return mine, other


def test_a_record_of_another_study_is_refused_by_line(tiny, two_studies, capsys):
    mine, other = two_studies
    _write_records(mine, _records(mine)[:2] + _records(other)[2:])
    for err in _resume_and_report_refuse(tiny, mine, capsys):
        assert "line 3 belongs to another study" in err


@pytest.mark.parametrize("tamper, message", [
    (lambda rs: rs + [{**rs[0], "replication": 3}], "line 4 holds replication 3, beyond the 3"),
    (lambda rs: rs + [rs[1]], "line 4 repeats replication 1 (first on line 2)"),
])
def test_a_stray_or_repeated_index_is_refused_by_line(tiny, two_studies, capsys, tamper,
                                                     message):
    mine, _ = two_studies
    _write_records(mine, tamper(_records(mine)))
    for err in _resume_and_report_refuse(tiny, mine, capsys, reps="5"):
        assert message in err


def test_records_without_study_json_are_never_adopted(tiny, two_studies, capsys):
    mine, _ = two_studies
    (mine / "study.json").unlink()
    (mine / "summary.json").unlink()
    for seed in ("2", "9"):
        code, err = _main(["run", tiny, "--reps", "3", "--seed", seed, "--workers", "1",
                           "--out", mine, "--resume"], capsys)
        assert code == 2 and "holds results without a study.json" in err, err
    assert len(_records(mine)) == 3  # nothing computed is lost


def test_records_saved_before_they_carried_the_study_are_read_when_study_json_matches(
        tiny, two_studies, capsys):
    mine, _ = two_studies
    before = (mine / "summary.json").read_text()
    _write_records(mine, [{k: v for k, v in r.items() if k not in ("study", "reps")}
                          for r in _records(mine)])
    code, err = _main(["report", mine], capsys)
    assert code == 0, err
    assert json.loads((mine / "summary.json").read_text()) == json.loads(before)
    code, err = _main(["run", tiny, "--reps", "4", "--workers", "1", "--out", mine,
                       "--resume"], capsys)
    assert code == 0, err
    assert [r["replication"] for r in _records(mine)] == [0, 1, 2, 3]


def test_temporary_files_a_kill_left_are_removed_by_the_next_run(tiny, tmp_path, capsys):
    out = tmp_path / "out"
    out.mkdir()
    # write_atomic's temporary names: a kill between creating and renaming leaves one empty
    stale = [out / ".summary.json.k2j4x9.tmp", out / ".replications.jsonl.a1b2c3.tmp"]
    for path in stale:
        path.write_bytes(b"")
    kept = out / "notes.tmp"  # not a name spillgauge writes: left alone
    kept.write_text("mine")
    code, err = _main(["run", tiny, "--reps", "1", "--workers", "1", "--out", out], capsys)
    assert code == 0, err
    assert not any(path.exists() for path in stale) and kept.read_text() == "mine"
    assert not list(out.glob(".*.tmp"))
