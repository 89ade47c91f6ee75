"""Each input a new user got wrong is refused in one line naming the option or field; Ctrl-C
prints one line, exits 130 and keeps the finished replications."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import pytest

from spillgauge.cli import main
from tests.conftest import TINY


def _main(args, capsys):
    try:
        code = main([str(a) for a in args])
    except SystemExit as exc:
        code = exc.code
    err = capsys.readouterr().err.strip()
    return code, err


def _csv_scenario(tmp_path, users: bytes) -> str:
    (tmp_path / "users.csv").write_bytes(users)
    path = tmp_path / "csv.toml"
    path.write_text('name = "csv"\n[calendar]\ndays = 2\n[users]\nfile = "users.csv"\n'
                    '[study]\nreps = 1\n[[design]]\nkind = "user"\n')
    return str(path)


def test_users_csv_with_a_byte_order_mark_loads(tmp_path, capsys):
    # Spreadsheet programs save "CSV UTF-8" with a leading U+FEFF.
    rows = "user_id,pool_id,orders_per_week\n" + "".join(f"u{i},p{i % 2},2\n" for i in range(20))
    scenario = _csv_scenario(tmp_path, b"\xef\xbb\xbf" + rows.encode())
    code, err = _main(["check", scenario], capsys)
    assert code == 0, err


def test_bad_csv_cell_names_line_and_user(tmp_path, capsys):
    rows = "user_id,pool_id,orders_per_week\nu1,p1,2\n\nu2,p1,lots\n"
    code, err = _main(["check", _csv_scenario(tmp_path, rows.encode())], capsys)
    assert code == 2
    # Line 4 of the file (a blank line 3 in between), user u2.
    assert err == ("spillgauge: error: users.file:orders_per_week (line 4, user_id 'u2') "
                   "must be a number in [0, 10000]; got 'lots'")


def test_edge_to_an_unknown_user_names_the_file_line(tmp_path, capsys):
    rows = "user_id,pool_id,orders_per_week\n" + "".join(f"u{i},p{i % 2},2\n" for i in range(6))
    scenario = _csv_scenario(tmp_path, rows.encode())
    (tmp_path / "edges.csv").write_text("user_a,user_b\nu0,u1\n\nu2,u3\nu4,ghost\n")
    text = open(scenario).read().replace("[study]", '[graph]\nmodel = "edge_list"\n'
                                         'file = "edges.csv"\n[study]')
    open(scenario, "w").write(text)
    code, err = _main(["check", scenario], capsys)
    # Line 5 of the file: the header, two edges and a blank line before it.
    assert code == 2
    assert err == ("spillgauge: error: graph.file:user_b (line 5) must be a user_id of the "
                   "users; got 'ghost'")


@pytest.mark.parametrize("cell", ["1_0", "0x10", "nan", "-inf", "1e400"])
def test_csv_numbers_are_plain_decimals(tmp_path, capsys, cell):
    rows = f"user_id,pool_id,orders_per_week\nu1,p1,{cell}\n"
    scenario = _csv_scenario(tmp_path, rows.encode())
    for command in (["check"], ["truth", "--reps", "1", "--workers", "1"]):
        code, err = _main([command[0], scenario, *command[1:]], capsys)
        assert code == 2 and "(line 2, user_id 'u1')" in err, err


def test_csv_errors_never_echo_the_file(tmp_path, capsys):
    secret = "SECRET_VALUE=" + "x" * 5000
    rows = f"user_id,pool_id,orders_per_week\nu1,p1,2,{secret}\n"
    code, err = _main(["check", _csv_scenario(tmp_path, rows.encode())], capsys)
    assert code == 2 and "SECRET" not in err and "(line 2)" in err
    code, err = _main(["check", _csv_scenario(tmp_path, f"{secret}\nu1\n".encode())], capsys)
    assert code == 2 and "SECRET" not in err and len(err) < 300


def test_duplicate_id_names_the_repeated_id(tmp_path, capsys):
    rows = "user_id,pool_id,orders_per_week\nu1,p1,2\nu2,p1,2\nu2,p1,3\n"
    code, err = _main(["check", _csv_scenario(tmp_path, rows.encode())], capsys)
    assert code == 2 and "(lines 3 and 4)" in err and "got 'u2'" in err


def test_check_estimates_memory_first(tiny, capsys, monkeypatch):
    from spillgauge.study import resources

    monkeypatch.setattr(resources, "available_memory_bytes", lambda: 10 * 2**20)
    code, err = _main(["check", tiny], capsys)
    assert code == 2 and "GiB is available" in err


def test_scheduler_without_dask_is_named(tiny, capsys, monkeypatch):
    monkeypatch.setitem(sys.modules, "dask.distributed", None)  # import fails as if absent
    code, err = _main(["truth", tiny, "--reps", "1", "--scheduler", "tcp://127.0.0.1:8786"],
                      capsys)
    assert code == 2 and err.startswith("spillgauge: error: --scheduler must be used with Dask")


def test_unreachable_scheduler_is_refused_quickly(tiny, capsys, monkeypatch):
    from spillgauge.study import executors

    monkeypatch.setattr(executors, "_CONNECT_TIMEOUT_S", 1.0)
    start = time.monotonic()
    code, err = _main(["truth", tiny, "--reps", "1", "--scheduler", "tcp://127.0.0.1:1"], capsys)
    assert code == 2 and "could not connect within 1 s" in err
    assert time.monotonic() - start < 30


@pytest.mark.parametrize("name", ["sub/dir/x", "..", ".", "a b"])
def test_new_refuses_by_name(tmp_path, capsys, monkeypatch, name):
    monkeypatch.chdir(tmp_path)
    code, err = _main(["new", name], capsys)
    assert code == 2 and len(err.splitlines()) == 1
    assert not any(tmp_path.iterdir())


def test_out_that_is_a_file_is_refused(tiny, tmp_path, capsys):
    code, err = _main(["run", tiny, "--reps", "1", "--workers", "1", "--out", tiny], capsys)
    assert code == 2 and err.startswith("spillgauge: error: --out must be a folder")


def _interrupt_after_first_replication(args, out, tmp_path):
    """Start the command in its own process group, press Ctrl-C once a replication is saved."""
    process = subprocess.Popen([sys.executable, "-m", "spillgauge", *map(str, args)],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                               cwd=tmp_path, start_new_session=True,
                               preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    log = out / "replications.jsonl"
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and process.poll() is None:
        if log.exists() and log.read_text().count("\n") >= 2:
            break
        time.sleep(0.05)
    os.killpg(process.pid, signal.SIGINT)
    _, err = process.communicate(timeout=120)
    return process.returncode, err


@pytest.mark.parametrize("workers", ["1", "2"])
def test_ctrl_c_is_one_line_and_keeps_finished_replications(tmp_path, workers):
    scenario = tmp_path / "slow.toml"
    scenario.write_text(TINY.replace("count = 120", "count = 3000").replace("days = 3",
                                                                          "days = 28"))
    out = tmp_path / "out"
    code, err = _interrupt_after_first_replication(
        ["run", scenario, "--reps", "400", "--workers", workers, "--out", out], out, tmp_path)
    assert code == 130, err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1, err
    assert "--resume" in err
    saved = [json.loads(line) for line in (out / "replications.jsonl").read_text().splitlines()]
    assert len(saved) >= 1


@pytest.mark.parametrize("line", ['[1, 2]', '{"a": 1}', '"x"', '{"replication": -1}', 'null',
                                  '{"replication": 0, "truth": {}, "estimates": {"other": {}}}'])
def test_tampered_log_is_refused_by_line(tiny, tmp_path, capsys, line):
    out = tmp_path / "out"
    assert _main(["run", tiny, "--reps", "2", "--workers", "1", "--out", out], capsys)[0] == 0
    with open(out / "replications.jsonl", "a") as log:
        log.write(line + "\n")
    for args in (["report", out], ["run", tiny, "--reps", "3", "--workers", "1", "--out", out,
                                   "--resume"]):
        code, err = _main(args, capsys)
        assert code == 2 and "replications.jsonl line 3 is not a replication record" in err


@pytest.mark.parametrize("text", ["[1]", '{"settings": 3, "seed": 1}', "{}", "\u00ff garbage"])
def test_tampered_study_file_is_refused(tiny, tmp_path, capsys, text):
    out = tmp_path / "out"
    assert _main(["run", tiny, "--reps", "1", "--workers", "1", "--out", out], capsys)[0] == 0
    (out / "study.json").write_text(text)
    for args in (["report", out], ["run", tiny, "--reps", "2", "--workers", "1", "--out", out,
                                   "--resume"]):
        code, err = _main(args, capsys)
        assert code == 2 and "study" in err and len(err.splitlines()) == 1


def test_progress_is_forced_when_not_a_terminal(tiny, tmp_path):
    # stderr is a pipe here: no bar unless --progress asks for it.
    plain = subprocess.run([sys.executable, "-m", "spillgauge", "truth", str(tiny), "--reps", "3",
                            "--workers", "1"], capture_output=True, text=True, cwd=tmp_path)
    forced = subprocess.run([sys.executable, "-m", "spillgauge", "truth", str(tiny), "--reps",
                             "3", "--workers", "1", "--progress"], capture_output=True, text=True,
                            cwd=tmp_path)
    assert plain.returncode == forced.returncode == 0
    assert plain.stderr == "" and "3/3" in forced.stderr


@pytest.mark.parametrize("model", ["none", "small_world", "pool_blocks", "communities"])
def test_graph_file_with_another_model_is_refused_by_name(tmp_path, capsys, model):
    (tmp_path / "edges.csv").write_text("source,target\nu0,u1\n")
    path = tmp_path / "g.toml"
    path.write_text(TINY.replace("[study]", f'[graph]\nmodel = "{model}"\nfile = "edges.csv"\n'
                                 "[study]"))
    code, err = _main(["check", path], capsys)
    assert code == 2 and len(err.splitlines()) == 1, err
    assert "graph.file must be left out" in err and repr(model) in err


def test_new_writes_only_below_the_current_folder_unless_allowed(tmp_path, capsys,
                                                                   monkeypatch):
    # A file outside the current folder needs --allow-outside; a system folder is refused
    # even then, and a link named NAME.toml counts where it points (common practice, no
    # source: a tool run as root must not write into the operating system's folders).
    here, elsewhere = tmp_path / "here", tmp_path / "elsewhere"
    here.mkdir()
    elsewhere.mkdir()
    monkeypatch.chdir(here)
    code, err = _main(["new", str(elsewhere / "x")], capsys)
    assert code == 2 and "--allow-outside" in err and len(err.splitlines()) == 1
    assert not any(elsewhere.iterdir())
    code, err = _main(["new", "../elsewhere/x"], capsys)
    assert code == 2 and "current folder" in err
    assert _main(["new", str(elsewhere / "x"), "--allow-outside"], capsys)[0] == 0
    assert (elsewhere / "x.toml").is_file()
    for name in ("/etc/x", "/usr/local/x", "/var/lib/x"):
        code, err = _main(["new", name, "--allow-outside", "--force"], capsys)
        assert code == 2 and "system folder" in err, name
    (here / "link.toml").symlink_to(elsewhere / "target.toml")
    code, err = _main(["new", "link", "--force"], capsys)
    assert code == 2 and "current folder" in err
    assert not (elsewhere / "target.toml").exists()
    assert _main(["new", "mine"], capsys)[0] == 0 and (here / "mine.toml").is_file()


def test_an_unknown_sweep_key_is_one_short_line_with_a_suggestion(tiny, capsys):
    # The whole list of numeric keys made a line of over 1,000 characters (found by the CLI
    # fuzz, seed 11); the line names an example and the closest key instead.
    code, err = _main(["sweep", tiny, "--vary", "="], capsys)
    assert code == 2 and len(err.splitlines()) == 1 and len(err) < 300
    code, err = _main(["sweep", tiny, "--vary", "pools.stock_covr=1,2"], capsys)
    assert code == 2 and "did you mean pools.stock_cover?" in err
