"""Bad files and options: one line naming file, line, column and value; exit 2; nothing written."""

from __future__ import annotations

import csv
import json
import re
from pathlib import Path

import pytest

from spillgauge.cli import main
from spillgauge.experiment.simulate import simulate_experiment, write_experiment
from spillgauge.study.run import run_study
from tests.experiment.conftest import small_market


@pytest.fixture(scope="module")
def folder(tmp_path_factory, scenario):
    out = tmp_path_factory.mktemp("experiment")
    write_experiment(simulate_experiment(scenario, "user", seed=3, start="2027-03-01"), out)
    return out


def _rows(folder: Path) -> list[list[str]]:
    with open(folder / "orders.csv", newline="") as handle:
        return list(csv.reader(handle))


def _write(path: Path, rows: list[list[str]]) -> Path:
    with open(path, "w", newline="") as handle:
        csv.writer(handle).writerows(rows)
    return path


def _refused(capsys, argv: list[str]) -> str:
    assert main(argv) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("spillgauge: error: "), captured.err
    assert "Traceback" not in captured.err
    return lines[0]


def _edit(row: int, column: int, value: str):
    def change(rows):
        rows[row][column] = value
        return rows
    return change


def _duplicate(rows):
    rows[6] = list(rows[5])
    return rows


def _drop_orders(rows):
    return [r[:3] for r in rows]


# (what, edit of the rows (row 0 is the header = line 1), line, column, value named)
CASES = [
    ("unknown user", _edit(4, 0, "ghost-7"), 5, "user_id", "ghost-7"),
    ("date after the window", _edit(5, 2, "2027-03-07"), 6, "date", "2027-03-07"),
    ("date before the window", _edit(2, 2, "2027-02-28"), 3, "date", "2027-02-28"),
    ("not a date", _edit(3, 2, "03/01/2027"), 4, "date", "03/01/2027"),
    ("duplicate row", _duplicate, 7, "date", None),
    ("negative orders", _edit(7, 3, "-1"), 8, "orders", "-1"),
    ("non-integer orders", _edit(8, 3, "1.5"), 9, "orders", "1.5"),
    ("not a number", _edit(9, 3, "many"), 10, "orders", "many"),
    ("another home pool", _edit(10, 1, "no-such-pool"), 11, "pool_id", "no-such-pool"),
    ("missing column", _drop_orders, 1, "orders", None),
]


@pytest.mark.parametrize("what, edit, line, column, value", CASES, ids=[c[0] for c in CASES])
def test_bad_orders_are_refused_by_file_line_column_and_value(capsys, folder, tmp_path, what,
                                                             edit, line, column, value):
    bad = _write(tmp_path / "orders.csv", edit(_rows(folder)))
    message = _refused(capsys, ["analyze", str(folder), "--orders", str(bad)])
    assert f"{bad} line {line} column {column} " in message
    if value is not None:
        assert f"got '{value}'" in message


def test_a_row_with_an_extra_cell_is_refused_by_line(capsys, folder, tmp_path):
    rows = _rows(folder)
    rows[11] = [*rows[11], "extra"]  # line 12
    bad = _write(tmp_path / "orders.csv", rows)
    message = _refused(capsys, ["analyze", str(folder), "--orders", str(bad)])
    assert message == (f"spillgauge: error: {bad} line 12 must be 4 comma-separated fields, as "
                       "many as the header; got '5 fields'")


@pytest.mark.parametrize("text, said", [("", "a CSV file of orders with a header line; got "
                                              "'an empty file'"),
                                        ("user_id,pool_id,date,orders\n",
                                         "at least one row below its header; got 'no rows'")])
def test_an_empty_orders_file_is_refused(capsys, folder, tmp_path, text, said):
    # A file with no orders at all is an export that failed, not an experiment with no effect.
    (tmp_path / "orders.csv").write_text(text)
    message = _refused(capsys, ["analyze", str(folder), "--orders", str(tmp_path / "orders.csv")])
    assert message.endswith(said), message


def test_the_good_file_is_read(capsys, folder, tmp_path):
    good = _write(tmp_path / "orders.csv", _rows(folder))
    assert main(["analyze", str(folder), "--orders", str(good)]) == 0
    assert "difference_in_means" in capsys.readouterr().out


def test_a_header_with_a_byte_order_mark_and_spaces_is_read(capsys, folder, tmp_path):
    # Spreadsheet exports often start with a UTF-8 byte-order mark and put a space after commas.
    text = (folder / "orders.csv").read_text().replace(",", ", ")
    (tmp_path / "orders.csv").write_text("\ufeff" + text, encoding="utf-8")
    assert main(["analyze", str(folder), "--orders", str(tmp_path / "orders.csv"), "--json"]) == 0
    again = json.loads(capsys.readouterr().out)
    assert main(["analyze", str(folder), "--json"]) == 0
    first = json.loads(capsys.readouterr().out)
    for key in ("estimate", "standard_error", "ci_low", "ci_high", "n_units"):
        assert again[key] == first[key]


def test_days_without_any_order_are_named(capsys, folder, tmp_path):
    # An export that stops early reads as zero orders on the last days: analyze says so.
    rows = [r for r in _rows(folder) if r[2] not in ("2027-03-05", "2027-03-06")]
    short = _write(tmp_path / "orders.csv", rows)
    assert main(["analyze", str(folder), "--orders", str(short)]) == 0
    out = capsys.readouterr().out
    assert "no orders at all on 2027-03-05, 2027-03-06" in out
    assert main(["analyze", str(folder)]) == 0
    assert "no orders at all" not in capsys.readouterr().out


def test_an_edited_assignment_is_refused(capsys, folder, tmp_path):
    import shutil

    copy = tmp_path / "copy"
    shutil.copytree(folder, copy)
    with open(copy / "assignment.csv", newline="") as handle:
        rows = list(csv.reader(handle))
    column = rows[0].index("arm")
    rows[3][column] = "control" if rows[3][column] == "treatment" else "treatment"
    _write(copy / "assignment.csv", rows)
    message = _refused(capsys, ["analyze", str(copy)])
    assert "assignment.csv line 4 column arm must be the arm of the user's unit" in message


@pytest.fixture(scope="module")
def studies(tmp_path_factory, scenario):
    root = tmp_path_factory.mktemp("studies")
    run_study(scenario, reps=2, seed=3, workers=1, out=root / "same")
    other = small_market(effect={"lift": 0.5})
    run_study(other, reps=2, seed=3, workers=1, out=root / "other")
    # same market, but its design labelled "user" treats 30% of users
    changed = small_market(design=[{"kind": "user", "share": 0.3, "label": "user"}])
    run_study(changed, reps=2, seed=3, workers=1, out=root / "changed")
    return root


def test_a_study_of_another_scenario_is_refused(capsys, folder, studies):
    message = _refused(capsys, ["analyze", str(folder), "--study", str(studies / "other")])
    assert "--study must be a study of the assignment's scenario 'small_market'" in message


def test_a_study_whose_design_has_other_keys_is_refused(capsys, folder, studies):
    message = _refused(capsys, ["analyze", str(folder), "--study", str(studies / "changed")])
    assert "--study must be a study holding the design 'user' with the same keys" in message


def test_a_study_of_the_same_scenario_gives_context(capsys, folder, studies):
    assert main(["analyze", str(folder), "--study", str(studies / "same")]) == 0
    out = capsys.readouterr().out
    assert re.search(r"in 2 simulations of this market this design's interval covered", out)
    # Every line fits a terminal: long sentences continue, indented, on the next line.
    assert max(map(len, out.splitlines())) <= 100, out
    assert all(line.startswith(("design", "effect", "in ", "  ")) for line in out.splitlines())


def test_a_study_folder_without_its_files_is_named(capsys, folder, studies, tmp_path):
    message = _refused(capsys, ["analyze", str(folder), "--study", str(tmp_path / "none")])
    assert "holds no finished study (no readable study.json)" in message
    (tmp_path / "half").mkdir()
    (tmp_path / "half" / "study.json").write_bytes((studies / "same" / "study.json").read_bytes())
    message = _refused(capsys, ["analyze", str(folder), "--study", str(tmp_path / "half")])
    assert "holds no finished study (no readable summary.json)" in message
    assert "Error" not in message  # no exception class names


def test_not_an_assignment_folder(capsys, tmp_path):
    message = _refused(capsys, ["analyze", str(tmp_path)])
    assert "DIR must be an assignment folder" in message


@pytest.mark.parametrize("option, value, named", [
    ("--start", "2027-03-01T06:00", "--start must be a midnight"),
    ("--start", "soon", "--start must be an ISO date"),
    ("--design", "nope", "--design must be a design label of the scenario"),
])
def test_bad_options_write_nothing(capsys, tmp_path, option, value, named):
    toml = tmp_path / "tiny.toml"
    toml.write_text('name = "tiny"\n[users]\ncount = 50\n[pools]\ncount = 4\n')
    options = {"--design": "user", "--out": str(tmp_path / "out"), option: value}
    argv = ["assign", str(toml), *[part for pair in options.items() for part in pair]]
    message = _refused(capsys, argv)
    assert named in message
    assert not (tmp_path / "out").exists()


def test_another_assignment_is_never_overwritten(capsys, tmp_path):
    toml = tmp_path / "tiny.toml"
    toml.write_text('name = "tiny"\n[users]\ncount = 50\n[pools]\ncount = 4\n')
    out = str(tmp_path / "out")
    assert main(["assign", str(toml), "--design", "user", "--seed", "1", "--start",
                 "2027-03-01", "--out", out]) == 0
    before = (tmp_path / "out" / "assignment.csv").read_bytes()
    # the same assignment again is fine; another seed is refused and leaves the files alone
    assert main(["assign", str(toml), "--design", "user", "--seed", "1", "--start",
                 "2027-03-01", "--out", out]) == 0
    capsys.readouterr()
    message = _refused(capsys, ["assign", str(toml), "--design", "user", "--seed", "2",
                                "--start", "2027-03-01", "--out", out])
    assert "holds another assignment" in message
    assert (tmp_path / "out" / "assignment.csv").read_bytes() == before


def test_a_switchback_needs_the_hour(capsys, scenario, tmp_path):
    # 2-hour ticks: daily user rows cannot say which block an order fell in.
    write_experiment(simulate_experiment(scenario, "switchback-12h", seed=3,
                                         start="2027-03-01"), tmp_path)
    message = _refused(capsys, ["analyze", str(tmp_path), "--orders",
                                str(tmp_path / "orders.csv")])
    assert "orders.csv line 1 column hour must be a column of the header: this design's " \
        "arms change within a day" in message


def _simulated(tmp_path: Path, outcome: str, label: str) -> Path:
    users = {"count": 600, "orders_per_week": 4.0, "history_days": 14,
             "basket_value_mean": 20.0, "basket_value_sd": 5.0}
    scenario = small_market(users=users, study={"reps": 4, "seed": 11, "outcome": outcome})
    out = tmp_path / f"{outcome}-{label}"
    write_experiment(simulate_experiment(scenario, label, seed=3, start="2027-03-01"), out)
    return out


@pytest.mark.parametrize("outcome, label, file, edit, line, column, value", [
    ("revenue", "user", "orders.csv", _edit(4, 4, "-3.5"), 5, "revenue", "-3.5"),
    ("revenue", "user", "orders.csv", _edit(6, 4, "lots"), 7, "revenue", "lots"),
    ("revenue", "user", "orders.csv", _edit(2, 4, "inf"), 3, "revenue", "inf"),
    ("revenue", "user", "orders.csv", lambda rows: [r[:4] for r in rows], 1, "revenue", None),
    ("revenue", "switchback-12h", "pool_orders.csv", _edit(3, 4, "NaN"), 4, "revenue", "NaN"),
    ("conversion", "switchback-12h", "pool_orders.csv", _edit(5, 4, "0.5"), 6, "conversions",
     "0.5"),
    ("conversion", "switchback-12h", "pool_orders.csv", _edit(2, 4, "-1"), 3, "conversions",
     "-1"),
    ("conversion", "switchback-12h", "pool_orders.csv", _edit(1, 4, "100000"), 2,
     "conversions", "100000"),
    ("conversion", "switchback-12h", "pool_orders.csv", lambda rows: [r[:4] for r in rows], 1,
     "conversions", None),
])
def test_bad_outcome_columns_are_refused_by_line(capsys, tmp_path, outcome, label, file, edit,
                                                 line, column, value):
    # Revenue is a number >= 0 per row; conversions (pool rows) a whole number of users, at
    # most the pool's users over its rows (a user converts once). Common practice, no source.
    folder = _simulated(tmp_path, outcome, label)
    with open(folder / file, newline="") as handle:
        rows = list(csv.reader(handle))
    assert rows[0][4] == column
    bad = _write(tmp_path / "bad.csv", edit(rows))
    message = _refused(capsys, ["analyze", str(folder), "--orders", str(bad)])
    assert f"{bad} line {line} column {column} " in message
    if value is not None:
        assert f"got '{value}'" in message


def test_conversion_user_rows_need_no_more_than_orders(capsys, tmp_path):
    # An orders file without revenue or conversions serves conversion: it is derived from orders.
    folder = _simulated(tmp_path, "conversion", "user")
    with open(folder / "orders.csv", newline="") as handle:
        assert next(csv.reader(handle)) == ["user_id", "pool_id", "date", "orders"]
    assert main(["analyze", str(folder)]) == 0
    out = capsys.readouterr().out
    assert "effect on share of users with a fulfilled order over 6 days" in out
    assert "relative to the control mean" in out
