"""The assignment folder: ``assignment.json``, ``assignment.csv``, ``calendar.csv`` and more.

The files hold the schedule in the terms of the team's market (user and pool
ids, dates), and read back into the very :class:`AssignmentSchedule` that was
drawn, so the analysis runs the design's estimator on the same schedule.

- ``assignment.csv``: one row per user: ``user_id, pool_id, pre_period_orders, unit``;
  the user's ``arm`` when it keeps one arm over the horizon; ``switch_on`` (the start
  of the unit's first treated period, or ``never``) when every unit, once treated,
  stays treated (a rollout); ``cluster`` and ``half`` for a test of interference.
- ``calendar.csv``: one row per unit and period: ``unit, start, end, arm, burn_in_end``
  (for a switchback, the blocks; for a rollout, each pool's first treated period is its
  switch-on time).
- ``exposure.csv``: for exposure-mapping designs, ``user_id, unit`` for every unit
  touching the user's closed graph neighbourhood.
"""

from __future__ import annotations

import json
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import sparse

from spillgauge.designs.registry import make_design_spec
from spillgauge.errors import ResultsError, ScenarioError
from spillgauge.experiment.assignment import Assignment
from spillgauge.experiment.balance import assignment_balance
from spillgauge.experiment.csv_checks import column_codes, column_floats, file_error, refuse_first
from spillgauge.files import dumps, write_atomic
from spillgauge.scenario.config import OUTCOMES
from spillgauge.scenario.reading import design_to_dict
from spillgauge.schedule import AssignmentSchedule

__all__ = ["write_assignment", "read_assignment", "assignment_record", "ARMS", "FORMAT"]

FORMAT = 1
ARMS = ("control", "treatment")
_JSON, _USERS, _CALENDAR, _EXPOSURE = ("assignment.json", "assignment.csv", "calendar.csv",
                                       "exposure.csv")


def _unit_labels(assignment: Assignment) -> np.ndarray:
    """Return the name of each unit: a user or pool id, ``market``, or a cluster number."""
    schedule = assignment.schedule
    kind = schedule.unit_kind
    if kind == "user":
        return assignment.user_ids
    if kind == "pool":
        return assignment.pool_ids[: schedule.n_units]
    if kind == "market":
        return np.array(["market"], dtype=object)
    return np.array([str(u) for u in range(schedule.n_units)], dtype=object)


def _burn_in_ticks(assignment: Assignment) -> int:
    hours = dict(assignment.spec.values).get("burn_in_hours", 0)
    return int(hours) // assignment.tick_hours


def _times(assignment: Assignment, ticks: np.ndarray) -> list[str]:
    return [str(t).replace(" ", "T") for t in assignment.tick_time(ticks).astype(str)]


def assignment_record(assignment: Assignment) -> dict:
    """Return the content of ``assignment.json``."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        tool = f"spillgauge {version('spillgauge')}"
    except PackageNotFoundError:  # run from a source tree without installing
        tool = "spillgauge (not installed)"
    schedule = assignment.schedule
    balance = assignment_balance(schedule, assignment.history)
    return {"format": FORMAT, "tool": tool,
            "scenario": assignment.scenario_name, "scenario_fingerprint": assignment.fingerprint,
            "design": design_to_dict(assignment.spec), "estimator": assignment.estimator_name(),
            "seed": assignment.seed, "start": assignment.start.isoformat(),
            "tick_hours": assignment.tick_hours, "days": assignment.days,
            "confidence": assignment.confidence, "outcome": assignment.outcome,
            "schedule": {"unit_kind": schedule.unit_kind,
                         "randomization": schedule.randomization,
                         "treated_probability": schedule.treated_probability,
                         "n_units": schedule.n_units,
                         "period_start_ticks": schedule.period_start_ticks.tolist()},
            "balance": (None if balance is None else balance.to_dict()),
            "pool_ids": assignment.pool_ids.tolist()}


def write_assignment(assignment: Assignment, out: str | Path) -> list[Path]:
    """Write the assignment folder; return the files written (each written atomically)."""
    out = Path(out)
    record = assignment_record(assignment)
    _check_not_another(out, record)
    out.mkdir(parents=True, exist_ok=True)
    schedule = assignment.schedule
    labels = _unit_labels(assignment)
    users = pd.DataFrame({"user_id": assignment.user_ids,
                          "pool_id": assignment.pool_ids[assignment.pool_of_user],
                          "pre_period_orders": assignment.history,
                          "unit": labels[schedule.unit_of_user]})
    if np.all(assignment.history == np.round(assignment.history)):
        users["pre_period_orders"] = assignment.history.astype(np.int64)
    if assignment.outcome == "revenue":  # the CUPED covariate: the value of those orders
        users.insert(3, "pre_period_revenue", assignment.covariate)
    if schedule.is_static:
        users["arm"] = np.array(ARMS, dtype=object)[schedule.user_is_treated().astype(int)]
    treated = schedule.is_treated
    if not schedule.is_static and np.all(treated[:, 1:] >= treated[:, :-1]):
        # units switch on once and stay on (a rollout): each user's switch-on time
        first = np.where(treated.any(axis=1), treated.argmax(axis=1), -1)
        switch_on = np.array(_times(assignment, schedule.period_start_ticks[np.maximum(first, 0)]),
                             dtype=object)
        switch_on[first < 0] = "never"
        users["switch_on"] = switch_on[schedule.unit_of_user]
    if schedule.stratum_of_unit is not None:
        users["stratum"] = schedule.stratum_of_unit[schedule.unit_of_user]
    if schedule.cluster_of_user is not None:
        users["cluster"] = schedule.cluster_of_user
        users["half"] = np.where(schedule.is_cluster_arm[schedule.cluster_of_user],
                                 "cluster", "user")
    starts = schedule.period_start_ticks
    ends = np.append(starts[1:], schedule.n_ticks)
    switched = schedule.is_treated != np.concatenate(
        (np.zeros((schedule.n_units, 1), bool), schedule.is_treated[:, :-1]), axis=1)
    burn = np.where(switched, np.minimum(starts[None, :] + _burn_in_ticks(assignment),
                                         ends[None, :]), starts[None, :])
    unit, period = np.divmod(np.arange(schedule.n_units * schedule.n_periods), schedule.n_periods)
    calendar = pd.DataFrame({"unit": labels[unit], "start": np.array(_times(assignment, starts))[
        period], "end": np.array(_times(assignment, ends))[period],
        "arm": np.array(ARMS, dtype=object)[schedule.is_treated[unit, period].astype(int)],
        "burn_in_end": _times(assignment, burn[unit, period])})
    written = [out / _USERS, out / _CALENDAR]
    write_atomic(out / _USERS, users.to_csv(index=False))
    write_atomic(out / _CALENDAR, calendar.to_csv(index=False))
    if schedule.exposure_units is not None:
        touching = sparse.coo_array(schedule.exposure_units)
        frame = pd.DataFrame({"user_id": assignment.user_ids[touching.row],
                              "unit": labels[touching.col]})
        write_atomic(out / _EXPOSURE, frame.to_csv(index=False))
        written.append(out / _EXPOSURE)
    write_atomic(out / _JSON, dumps(record))
    return [out / _JSON, *written]


def _check_not_another(out: Path, record: dict) -> None:
    """Refuse a folder that holds another assignment: a team may already be running it."""
    path = out / _JSON
    if not path.is_file():
        return
    try:
        saved = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError):
        saved = {}
    same = ("scenario_fingerprint", "design", "seed", "start")
    if {k: saved.get(k) for k in same} != json.loads(dumps({k: record[k] for k in same})):
        raise ResultsError(f"{out} holds another assignment ({saved.get('design', {}).get('label')}"
                           f", seed {saved.get('seed')}, start {saved.get('start')}); choose "
                           "another --out folder or delete it")


def _read_csv(path: Path, columns: tuple[str, ...]) -> pd.DataFrame:
    if not path.is_file():
        raise ScenarioError(str(path), "an existing file of the assignment folder", str(path))
    frame = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8-sig")
    for column in columns:
        if column not in frame.columns:
            raise file_error(path, 1, column, "a column of the header (found: "
                          + ", ".join(frame.columns) + ")", ",".join(frame.columns))
    return frame


def read_assignment(folder: str | Path) -> Assignment:
    """Read an assignment folder back into the :class:`Assignment` that was written.

    Raises
    ------
    ScenarioError
        Naming the file, line, column and value of anything that does not fit.
    """
    folder = Path(folder)
    record_path = folder / _JSON
    if not record_path.is_file():
        raise ScenarioError("DIR", "an assignment folder written by `spillgauge assign` or "
                            "`spillgauge simulate` (it has no assignment.json)", str(folder))
    try:
        record = json.loads(record_path.read_text(encoding="utf-8"))
        design = dict(record["design"])
        spec = make_design_spec(design.pop("kind"), {k: v for k, v in design.items()
                                                     if k != "label"}, label=design["label"])
        info = record["schedule"]
        pool_ids = np.array([str(p) for p in record["pool_ids"]], dtype=object)
        start = datetime.fromisoformat(record["start"])
        tick_hours, days = int(record["tick_hours"]), int(record["days"])
        outcome = str(record.get("outcome", "orders"))  # files before outcomes hold orders
    except (OSError, json.JSONDecodeError, KeyError, TypeError, ValueError) as exc:
        raise ScenarioError(str(record_path), "an assignment.json written by `spillgauge "
                            "assign`", f"{type(exc).__name__}: {exc}") from None
    if outcome not in OUTCOMES:
        raise ScenarioError(f"{record_path} outcome", "one of " + ", ".join(OUTCOMES), outcome)
    n_ticks = days * 24 // tick_hours
    users_path = folder / _USERS
    users = _read_csv(users_path, ("user_id", "pool_id", "pre_period_orders", "unit"))
    user_ids = users["user_id"].to_numpy(dtype=object)
    pool_of_user = column_codes(users_path, users, "pool_id", pool_ids.tolist(),
                           "a pool of assignment.json")
    history = pd.to_numeric(users["pre_period_orders"], errors="coerce").to_numpy(float)
    refuse_first(users_path, users, ~np.isfinite(history), "pre_period_orders", "a number")
    pre_outcome = None
    if outcome == "revenue":
        if "pre_period_revenue" not in users.columns:
            raise file_error(users_path, 1, "pre_period_revenue", "a column of the header: the "
                             "assignment's outcome is revenue", ",".join(users.columns))
        pre_outcome = column_floats(users["pre_period_revenue"])
        refuse_first(users_path, users, ~(np.isfinite(pre_outcome) & (pre_outcome >= 0)),
                     "pre_period_revenue", "a number >= 0")
    partial = Assignment(spec=spec, schedule=None, seed=int(record["seed"]), start=start,
                         tick_hours=tick_hours, days=days,
                         confidence=float(record["confidence"]), user_ids=user_ids,
                         pool_ids=pool_ids, pool_of_user=pool_of_user, history=history,
                         scenario_name=str(record["scenario"]),
                         fingerprint=str(record["scenario_fingerprint"]), outcome=outcome,
                         pre_outcome=pre_outcome)
    kind = info["unit_kind"]
    n_units = int(info["n_units"])
    labels = (user_ids if kind == "user" else pool_ids[:n_units] if kind == "pool"
              else np.array(["market"] if kind == "market" else
                            [str(u) for u in range(n_units)], dtype=object))
    unit_of_user = column_codes(users_path, users, "unit", labels, f"a {kind} of the design")
    starts = np.asarray(info["period_start_ticks"], dtype=np.int64)
    calendar_path = folder / _CALENDAR
    calendar = _read_csv(calendar_path, ("unit", "start", "arm"))
    unit = column_codes(calendar_path, calendar, "unit", labels, f"a {kind} of the design")
    period = column_codes(calendar_path, calendar, "start", _times(partial, starts),
                     "the start of a period of assignment.json")
    arm = column_codes(calendar_path, calendar, "arm", list(ARMS), "'control' or 'treatment'")
    is_treated = np.zeros((n_units, starts.size), dtype=bool)
    seen = np.zeros_like(is_treated)
    is_treated[unit, period] = arm == 1
    seen[unit, period] = True
    if not seen.all() or len(calendar) != seen.size:
        raise ScenarioError(str(calendar_path), f"one row per unit and period ({seen.size})",
                            len(calendar))
    cluster_of_user = is_cluster_arm = exposure = stratum_of_unit = None
    if "stratum" in users.columns:
        stratum = pd.to_numeric(users["stratum"], errors="coerce").to_numpy(float)
        refuse_first(users_path, users, ~(np.isfinite(stratum) & (stratum >= 0)
                                          & (stratum == np.round(stratum)) & (stratum < 1e9)),
                     "stratum", "a whole number >= 0")
        stratum_of_unit = np.zeros(n_units, dtype=np.int64)
        stratum_of_unit[unit_of_user] = stratum.astype(np.int64)
        refuse_first(users_path, users, stratum_of_unit[unit_of_user] != stratum, "stratum",
                     "the same stratum for every user of a unit")
    if "cluster" in users.columns:
        cluster_of_user = pd.to_numeric(users["cluster"]).to_numpy(np.int64)
        half = users["half"].to_numpy() == "cluster"
        is_cluster_arm = np.zeros(int(cluster_of_user.max()) + 1, dtype=bool)
        is_cluster_arm[cluster_of_user[half]] = True
    if (folder / _EXPOSURE).is_file():
        pairs = _read_csv(folder / _EXPOSURE, ("user_id", "unit"))
        rows = column_codes(folder / _EXPOSURE, pairs, "user_id", user_ids.tolist(), "a user")
        cols = column_codes(folder / _EXPOSURE, pairs, "unit", labels.tolist(), "a unit")
        exposure = sparse.csr_array((np.ones(rows.size), (rows, cols)),
                                    shape=(user_ids.size, n_units))
    schedule = AssignmentSchedule(unit_of_user=unit_of_user, is_treated=is_treated,
                                  period_start_ticks=starts, n_ticks=n_ticks,
                                  treated_probability=float(info["treated_probability"]),
                                  unit_kind=kind, randomization=info["randomization"],
                                  exposure_units=exposure, cluster_of_user=cluster_of_user,
                                  is_cluster_arm=is_cluster_arm,
                                  stratum_of_unit=stratum_of_unit)
    if "arm" in users.columns:
        given = column_codes(users_path, users, "arm", list(ARMS), "'control' or 'treatment'")
        refuse_first(users_path, users, given != schedule.user_is_treated().astype(int), "arm",
                     "the arm of the user's unit in calendar.csv")
    import dataclasses

    return dataclasses.replace(partial, schedule=schedule)
