"""The command line as a user meets it: exit codes, one-line errors, JSON keys, files."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from spillgauge.cli import main

TINY = """name = "tiny"
[calendar]
days = 7
[users]
count = 400
[pools]
count = 4
stock_cover = 1.2
[effect]
lift = 0.3
[study]
reps = 4
seed = 2
[[design]]
kind = "user"
[[design]]
kind = "cluster"
[[design]]
kind = "switchback"
block_hours = 24
"""


@pytest.fixture
def tiny(tmp_path):
    path = tmp_path / "tiny.toml"
    path.write_text(TINY)
    return path


def _run(*args):
    return subprocess.run([sys.executable, "-m", "spillgauge", *args], capture_output=True,
                          text=True)


@pytest.mark.parametrize("args, needle", [
    (["frobnicate"], "invalid choice"),
    (["truth", "no/such/file.toml"], "scenario must be an existing file"),
    (["truth", "{tiny}", "--reps", "x"], "--reps: must be a whole number"),
    (["sweep", "{tiny}", "--vary", "pools.stock_cover=1:2"], "--vary must be"),
    (["sweep", "{tiny}", "--vary", "pools.no_such_key=1:2:3"], "numeric scenario key"),
    (["sweep", "{tiny}"], "--vary"),
    (["report", "{tiny}"], "not a results folder"),
    (["run", "{tiny}.missing"], "scenario must be an existing file"),
])
def test_errors_are_one_line_and_exit_2(args, needle, tiny):
    result = _run(*[a.format(tiny=tiny) for a in args])
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    assert needle in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1


def test_bad_scenario_value_names_the_field(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text('name = "bad"\n[pools]\ncount = -3\n')
    result = _run("check", str(path))
    assert result.returncode == 2
    assert result.stderr.strip() == "spillgauge: error: pools.count must be an int >= 1; got -3"


def test_truth_json_has_the_documented_keys(tiny, capsys):
    assert main(["truth", str(tiny), "--reps", "3", "--json", "--workers", "1"]) == 0
    data = json.loads(capsys.readouterr().out)
    for key in ("gte", "gte_se", "control_mean", "treated_mean", "control_fill_rate",
                "treated_fill_rate", "reps"):
        assert key in data
    assert data["reps"] == 3
    assert data["treated_mean"] - data["control_mean"] == pytest.approx(data["gte"])


def test_check_describes_the_market(tiny, capsys):
    assert main(["check", str(tiny)]) == 0
    out = capsys.readouterr().out
    assert "users       400" in out and "pools       4" in out and "clusters" in out


def test_list_wraps_each_description_under_itself(capsys):
    from spillgauge.bundled import bundled_scenarios
    from spillgauge.scenario.reading import load_scenario

    assert main(["list"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert max(map(len, lines)) <= 100
    starts = [i for i, line in enumerate(lines) if not line.startswith(" ")]
    assert len(starts) == len(bundled_scenarios())
    for scenario, i, j in zip(map(load_scenario, bundled_scenarios()), starts,
                              [*starts[1:], len(lines)]):
        assert all(line.startswith(" " * 15) for line in lines[i + 1:j])
        said = " ".join(" ".join(lines[i:j]).split())
        assert said == f"{scenario.name} {' '.join(scenario.description.split())}"


def test_run_writes_summary_and_replications(tiny, tmp_path, capsys):
    out = tmp_path / "res"
    assert main(["run", str(tiny), "--out", str(out), "--workers", "1", "--quiet"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["reps"] == 4 and summary["scenario"] == "tiny"
    assert {d["label"] for d in summary["designs"]} == {"user", "cluster-pools", "switchback-24h"}
    for key in ("gte", "gte_se", "control_mean", "treated_mean"):
        assert key in summary["truth"]
    for key in ("label", "kind", "estimator", "mean_estimate", "bias", "relative_bias", "sd",
                "rmse", "coverage", "ci_width", "power", "type_s", "type_m"):
        assert key in summary["designs"][0]
    assert set(summary["recommendation"]) >= {"label", "reason"}
    lines = (out / "replications.csv").read_text().strip().splitlines()
    assert len(lines) == 1 + 4 * 3
    assert "recommendation:" in capsys.readouterr().out


def test_other_study_folder_is_refused(tiny, tmp_path, capsys):
    out = tmp_path / "res"
    assert main(["run", str(tiny), "--out", str(out), "--workers", "1", "--quiet"]) == 0
    assert main(["run", str(tiny), "--out", str(out), "--seed", "99", "--quiet"]) == 2
    assert "not scenario 'tiny' with seed 99" in capsys.readouterr().err


def test_sweep_writes_table_plots_and_answer(tiny, tmp_path, capsys):
    out = tmp_path / "sweep"
    assert main(["sweep", str(tiny), "--vary", "pools.stock_cover=1.0,3.0", "--reps", "3",
                 "--workers", "1", "--out", str(out), "--quiet"]) == 0
    printed = capsys.readouterr().out
    assert "pools.stock_cover" in printed
    for name in ("sweep.csv", "sweep.json", "sweep.html", "sweep_bias.png"):
        assert (out / name).stat().st_size > 0
    rows = (out / "sweep.csv").read_text().strip().splitlines()
    assert len(rows) == 1 + 2 * 3


def test_new_writes_a_scenario_that_checks(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert main(["new", "harbour"]) == 0
    assert main(["check", "harbour.toml"]) == 0
    assert "scenario harbour: valid" in capsys.readouterr().out
    assert main(["new", "harbour"]) == 2
