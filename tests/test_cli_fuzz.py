"""Fuzz the command line itself: mutated scenarios, CSV files and option values.

Whatever a user types or saves, the command either works (exit 0) or prints one
line naming what is wrong and exits 2: never a traceback, never an unexpected
error. ``SPILLGAUGE_DEBUG=1`` makes an unexpected error raise here, so a failing
case shows its traceback and its arguments. Cases are drawn from a fixed seed.
"""

from __future__ import annotations

import contextlib
import io
import random
import subprocess
import sys

import pytest

from spillgauge.cli import main

TINY = """name = "tiny"
[calendar]
days = 3
diurnal_amplitude = 0.5
[users]
count = 120
orders_per_week = 2.0
[pools]
count = 4
stock_cover = 1.2
restock_every_hours = 24
lead_time_hours = 4
[graph]
model = "small_world"
mean_degree = 4
[effect]
lift = 0.3
peer_lift = 0.1
carryover_half_life_hours = 2
[study]
reps = 2
seed = 2
[[design]]
kind = "user"
[[design]]
kind = "cluster"
clusters = "pools"
[[design]]
kind = "switchback"
block_hours = 12
burn_in_hours = 2
[[design]]
kind = "user"
strata = "pre_period"
pre_period_strata = 3
"""

CSV_SCENARIO = """name = "fromcsv"
[calendar]
days = 2
[users]
file = "users.csv"
history_days = 14
[pools]
file = "pools.csv"
[study]
reps = 1
[[design]]
kind = "user"
[[design]]
kind = "cluster"
"""

# Values a user might type by mistake, or a program might write.
JUNK = ["-1", "0", "0.5", "1", "3", "1e20", "-1e20", str(2**63), str(-2**63), '"x"', '""',
        "true", "[1, 2]", "{a = 1}", "nan", "inf", "-inf", "1e-300", "1e308", '"1_0"', "1_0",
        '"../.."', '"."', '".."', '"sub/dir"', '"<script>"', "2.5", "-0.0", "999999"]
CELLS = ["", "x", "-3", "1_0", "nan", "inf", "1e400", "0x10", " 2 ", "1e3", "\u00e9", "0",
         "2**63", "9223372036854775807", "1e13", '"a,b"', "x" * 300]
OPTIONS = {
    "--reps": ["0", "-1", "1", "2", "x", "1e9", "", "10000000", "1.5", " 1"],
    "--seed": ["-1", "0", "7", str(2**63), str(2**64), "x", "1e3", ""],
    "--workers": ["0", "-2", "1", "2", "x", "100000", ""],
    "--scheduler": ["junk", "tcp://", "http://[::1", ":::", "tcp://999.1.1.1:x"],
    "--vary": ["pools.stock_cover=1:2:2", "effect.lift=0,0.1", "x", "=", "a=b", "effect.lift=",
               "effect.lift=1:2", "effect.lift=0:1:0", "study.reps=1:2:2", "name=1,2",
               "effect.lift=0:1:100000", "effect.lift=nan,1", "design.nope.block_hours=1,2",
               "calendar.days=1,1e9"],
}


def _mutate_toml(text: str, rnd: random.Random) -> str:
    lines = text.splitlines()
    for _ in range(rnd.randint(1, 2)):
        k = rnd.randrange(len(lines))
        action = rnd.choices(range(7), weights=[6, 2, 1, 1, 2, 6, 1])[0]
        if action == 0 and "=" in lines[k]:
            key = lines[k].split("=")[0]
            lines[k] = f"{key}= {rnd.choice(JUNK)}"
        elif action == 1:
            del lines[k]
        elif action == 2:
            lines.insert(k, lines[rnd.randrange(len(lines))])
        elif action == 3:
            lines[k] = lines[k][: rnd.randrange(len(lines[k]) + 1)]
        elif action == 4:
            lines.insert(k, rnd.choice(["[pools]", "[[design]]", "bogus = 1", "[nope]",
                                        'kind = "switchback"', "x = [[[[[[[[1]]]]]]]]",
                                        'file = "missing.csv"', "\x00", 'model = "edge_list"']))
        elif action == 5 and "=" in lines[k]:
            key = lines[k].split("=")[0].strip()
            lines[k] = f"{key} = {rnd.choice(JUNK)}"
        else:
            lines[k] = lines[k].replace("=", rnd.choice(["==", ":", "= =", "="]))
    return "\n".join(lines) + "\n"


def _users_csv(rnd: random.Random, n_users: int = 40) -> str:
    rows = [["user_id", "pool_id", "orders_per_week", "history_orders"]]
    rows += [[f"u{i}", f"p{i % 3}", f"{0.5 + (i % 4)}", str(i % 6)] for i in range(n_users)]
    for _ in range(rnd.randint(0, 3)):
        row = rnd.randrange(len(rows))
        col = rnd.randrange(4)
        action = rnd.randrange(5)
        if action == 0 and col < len(rows[row]):
            rows[row][col] = rnd.choice(CELLS)
        elif action == 1:
            rows[row] = rows[row][: rnd.randrange(4)]
        elif action == 2:
            rows[row] = rows[row] + ["extra"]
        elif action == 3:
            rows.insert(row, [])
        elif rows[row]:
            rows.append(list(rows[row]))  # a repeated row (and id)
    return "\n".join(",".join(r) for r in rows) + "\n"


def _pools_csv(rnd: random.Random) -> str:
    rows = [["pool_id", "order_up_to"], ["p0", "40"], ["p1", "30"], ["p2", "50"]]
    if rnd.random() < 0.5:
        rows[rnd.randrange(len(rows))][rnd.randrange(2)] = rnd.choice(CELLS)
    return "\n".join(",".join(r) for r in rows) + "\n"


def _write_bytes(path, text: str, rnd: random.Random) -> None:
    data = text.encode("utf-8")
    roll = rnd.random()
    if roll < 0.15:
        data = b"\xef\xbb\xbf" + data  # the byte-order mark spreadsheet programs write
    elif roll < 0.2:
        data = data.replace(b"u1", b"\xff\xfe", 1)  # not UTF-8
    elif roll < 0.25:
        data = data[: rnd.randrange(len(data) + 1)]
    path.write_bytes(data)


def _case(rnd: random.Random, tmp_path, k: int) -> list[str]:
    """Draw one command line (and write its files)."""
    folder = tmp_path / f"case{k}"
    folder.mkdir()
    if rnd.random() < 0.3:
        _write_bytes(folder / "users.csv", _users_csv(rnd), rnd)
        _write_bytes(folder / "pools.csv", _pools_csv(rnd), rnd)
        text = CSV_SCENARIO if rnd.random() < 0.6 else _mutate_toml(CSV_SCENARIO, rnd)
    else:
        text = _mutate_toml(TINY, rnd) if rnd.random() < 0.85 else TINY
    scenario = folder / "s.toml"
    _write_bytes(scenario, text, rnd)
    command = rnd.choices(["check", "truth", "run", "sweep", "report", "new"],
                          weights=[40, 40, 6, 3, 5, 6])[0]
    if command == "new":
        return ["new", str(folder / rnd.choice(["x", "sub/dir/x", "..", ".", "a b", "ok.toml",
                                                "s", "-", "é"]))]
    if command == "report":
        return ["report", str(rnd.choice([folder, scenario, folder / "missing", "/dev/null"]))]
    args = [command, str(scenario)]
    allowed = {"check": ["--seed"], "truth": ["--reps", "--seed", "--workers", "--scheduler"],
               "run": ["--reps", "--seed", "--workers", "--scheduler"],
               "sweep": ["--reps", "--seed", "--workers", "--vary", "--scheduler"]}[command]
    for option in allowed:
        if rnd.random() < 0.2:
            args += [option, rnd.choice(OPTIONS[option])]
    if command in ("truth", "run", "sweep"):
        if "--reps" not in args:
            args += ["--reps", "1"]
        if "--workers" not in args:
            args += ["--workers", "1"]
    if command == "sweep" and "--vary" not in args:
        args += ["--vary", "effect.lift=0,0.2"]
    if command in ("run", "sweep"):
        args += ["--out", str(rnd.choice([folder / "out", scenario, "/proc/nope"]))]
    return args


def _run_cases(tmp_path, monkeypatch, n_cases: int, seed: int) -> dict:
    """Run ``n_cases`` drawn command lines in this process; return exit-code counts."""
    monkeypatch.setenv("SPILLGAUGE_DEBUG", "1")  # an unexpected error raises here
    monkeypatch.chdir(tmp_path)
    rnd = random.Random(seed)
    codes: dict[int, int] = {}
    for k in range(n_cases):
        args = _case(rnd, tmp_path, k)
        err = io.StringIO()
        with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(err):
            try:
                code = main(args)
            except SystemExit as exc:  # argparse's own exit
                code = exc.code
            except BaseException as exc:
                raise AssertionError(f"case {k}: {args} raised {exc!r}") from exc
        message = err.getvalue()
        assert code in (0, 2), f"case {k}: {args} exited {code}: {message}"
        assert "Traceback" not in message, f"case {k}: {args}"
        if code == 2:
            lines = message.strip().splitlines()
            assert len(lines) == 1 and lines[0].startswith("spillgauge"), \
                f"case {k}: {args}: {message!r}"
            assert len(lines[0]) < 600, f"case {k}: {args}: message too long"
        codes[code] = codes.get(code, 0) + 1
    return codes


def test_cli_fuzz_never_shows_a_traceback(tmp_path, monkeypatch):
    codes = _run_cases(tmp_path, monkeypatch, n_cases=300, seed=20261203)
    # Both outcomes occur: the mutations are not all fatal, nor all harmless.
    assert codes.get(0, 0) >= 20 and codes.get(2, 0) >= 100, codes


@pytest.mark.slow
def test_cli_fuzz_many_cases(tmp_path, monkeypatch):
    codes = _run_cases(tmp_path, monkeypatch, n_cases=3000, seed=7)
    assert codes.get(0, 0) >= 200 and codes.get(2, 0) >= 1000, codes


@pytest.mark.parametrize("args", [
    ["truth", "{tiny}", "--reps", "0"],
    ["truth", "{tiny}", "--workers", "0"],
    ["run", "{tiny}", "--workers", "-2"],
    ["check", "{tiny}", "--seed", "-5"],
    ["truth", "{tiny}", "--reps", "1", "--scheduler", "junk"],
    ["new", "{dir}/sub/dir/x"],
    ["new", ".."],
])
def test_listed_cases_are_one_line_in_a_real_process(args, tmp_path):
    """The cases a new user met, run as a separate process (worker output included)."""
    tiny = tmp_path / "tiny.toml"
    tiny.write_text(TINY)
    result = subprocess.run([sys.executable, "-m", "spillgauge",
                             *[a.format(tiny=tiny, dir=tmp_path) for a in args]],
                            capture_output=True, text=True, cwd=tmp_path, timeout=120)
    assert result.returncode == 2, result.stderr
    assert "Traceback" not in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1, result.stderr
