"""Reading the experiment's orders into the outcome panel the simulation builds.

Two layouts are read (a missing row counts as zero orders):

- user rows, ``user_id, date, orders`` (``pool_id`` optional, checked against the
  assignment; ``hour`` optional): what a design that keeps each user in one arm
  needs, since its estimator reads each user's orders over the horizon;
- pool rows, ``pool_id, date, hour, orders``: enough for a design whose arms change
  over time (switchback, rollout), whose estimator reads each pool's orders per
  tick. User rows with ``hour`` serve these designs too.

``date`` is ``YYYY-MM-DD`` inside the assignment's window; ``hour`` is 0-23, the
hour of the day the orders were placed in. A bad value is refused with the file,
its line (the header is line 1), the column and the value.

The assignment's outcome (``study.outcome`` of its scenario) says what else a row needs:

- ``"orders"``: nothing more;
- ``"revenue"``: ``revenue``, the value of the row's fulfilled orders (a number >= 0);
  a user's revenue is the sum of the user's rows, added day by day in date order;
- ``"conversion"``: user rows need nothing more: a user converts in the tick of the
  first row with ``orders > 0`` (the simulation's definition: the period of the
  user's first fulfilled order); pool rows cannot tell a user's first order, so
  they need ``conversions``, the number of the pool's users whose first fulfilled
  order of the experiment was placed in that hour.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from spillgauge.errors import ScenarioError
from spillgauge.experiment.assignment import Assignment
from spillgauge.experiment.csv_checks import column_codes, column_floats, file_error, refuse_first
from spillgauge.panel import OutcomePanel

__all__ = ["read_orders", "panel_from_counts"]

_COLUMNS = ("user_id", "pool_id", "date", "hour", "orders", "revenue", "conversions")


def _numbers(column: pd.Series) -> np.ndarray:
    """Return a column as floats (NaN where it is not a number); integers take the fast path."""
    try:
        return column.astype(np.int64).to_numpy(dtype=float)
    except (ValueError, TypeError, OverflowError):
        return pd.to_numeric(column, errors="coerce").to_numpy(float)


def panel_from_counts(assignment: Assignment, *, user_day: np.ndarray, pool_tick: np.ndarray,
                      outcome_days: np.ndarray | None = None,
                      pool_outcome: np.ndarray | None = None) -> OutcomePanel:
    """Return the outcome panel of orders counted per user-day and per pool-tick.

    Parameters
    ----------
    assignment : Assignment
        Gives the users' home pools, pre-period orders and the calendar.
    user_day : ndarray of int, shape (n_users, days)
        Fulfilled orders of each user on each day.
    pool_tick : ndarray of int, shape (n_pools, n_ticks)
        Fulfilled orders of each pool's users in each tick (for designs whose arms
        change over time).
    outcome_days, pool_outcome : ndarray of float, optional
        The outcome's flow per user-day and per pool-tick when the outcome is not
        orders (revenue; conversion: 1 in the period of a user's first order).

    Orders seen are orders fulfilled: ``demanded`` equals ``fulfilled`` and no
    order is lost (a team's orders table holds what was sold); stock is unknown (0).
    """
    user_day = np.asarray(user_day).astype(np.int32)
    pool_tick = np.asarray(pool_tick).astype(np.int64)
    return OutcomePanel(fulfilled=user_day, demanded=user_day,
                        pool_of_user=assignment.pool_of_user, history=assignment.history,
                        pre_outcome=assignment.covariate,
                        pool_fulfilled=pool_tick, pool_demanded=pool_tick,
                        pool_lost=np.zeros_like(pool_tick), pool_stock=np.zeros_like(pool_tick),
                        tick_hours=assignment.tick_hours, outcome_days=outcome_days,
                        pool_outcome=pool_outcome)


def read_orders(path: str | Path, assignment: Assignment) -> OutcomePanel:
    """Read an orders CSV file into the outcome panel of the assignment's market.

    Raises
    ------
    ScenarioError
        For a missing or unknown column, an unknown user or pool, a user's row
        naming another pool than the assignment, a date outside the window, an
        hour outside 0-23, a negative or non-integer count, a revenue that is not
        a number >= 0, more conversions than a pool has users, or a duplicate row;
        naming the file, line, column and value.
    """
    path = Path(path)
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False, skip_blank_lines=False,
                            encoding="utf-8-sig", skipinitialspace=True)
    except pd.errors.EmptyDataError:
        raise ScenarioError(str(path), "a CSV file of orders with a header line", "an empty file"
                            ) from None
    except (OSError, UnicodeDecodeError, pd.errors.ParserError) as exc:
        fields = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", str(exc))
        if fields:  # a row with more cells than the header
            expected, line, saw = fields.groups()
            raise ScenarioError(f"{path} line {line}", f"{expected} comma-separated fields, as "
                                "many as the header", f"{saw} fields") from None
        raise ScenarioError(str(path), "a readable CSV file of orders",
                            f"{type(exc).__name__}: {str(exc).splitlines()[0]}") from None
    if frame.empty:
        raise ScenarioError(str(path), "a CSV file of orders with at least one row below its "
                            "header", "no rows") from None
    frame.columns = [c.strip() for c in frame.columns]
    for column in frame.columns:
        if column not in _COLUMNS:
            raise file_error(path, 1, column, "a known column (one of " + ", ".join(_COLUMNS) + ")",
                          column)
    by_user = "user_id" in frame.columns
    needs_ticks = not assignment.schedule.is_static
    required = ["date", "orders"] + (["user_id"] if by_user else ["pool_id"])
    if needs_ticks and assignment.tick_hours < 24:
        required.append("hour")
    if not by_user and not needs_ticks:
        required.insert(0, "user_id")  # a design with one arm per user needs user rows
    outcome = assignment.outcome
    if outcome == "revenue":
        required.append("revenue")
    elif outcome == "conversion" and not by_user:
        required.append("conversions")
    why = {"hour": ": this design's arms change within a day, so its estimator needs the "
                   "hour of each order", "user_id": ": this design keeps each user in one "
                   "arm, so its estimator needs each user's orders",
           "revenue": ": the assignment's outcome is revenue, so each row needs the value "
                      "of its fulfilled orders",
           "conversions": ": the assignment's outcome is conversion and pool rows cannot "
                          "tell a user's first order, so each row needs the number of the "
                          "pool's users whose first order fell in it"}
    for column in required:
        if column not in frame.columns:
            raise file_error(path, 1, column, "a column of the header" + why.get(column, "")
                             + " (found: " + ", ".join(frame.columns) + ")",
                             ",".join(frame.columns))
    n_users, n_pools = assignment.user_ids.size, assignment.pool_ids.size
    if by_user:
        user = column_codes(path, frame, "user_id", assignment.user_ids,
                            "a user_id of the assignment")
        pool = assignment.pool_of_user[user]
        if "pool_id" in frame.columns:
            given = column_codes(path, frame, "pool_id", assignment.pool_ids,
                                 "a pool_id of the assignment")
            refuse_first(path, frame, given != pool, "pool_id",
                       "the user's home pool in assignment.csv")
    else:
        pool = column_codes(path, frame, "pool_id", assignment.pool_ids,
                            "a pool_id of the assignment")
    dates = pd.to_datetime(frame["date"], format="%Y-%m-%d", errors="coerce")
    refuse_first(path, frame, dates.isna().to_numpy(), "date", "a date YYYY-MM-DD")
    day = ((dates - pd.Timestamp(assignment.start)).dt.days).to_numpy(np.int64)
    last = (pd.Timestamp(assignment.start) + pd.Timedelta(days=assignment.days - 1)).date()
    refuse_first(path, frame, (day < 0) | (day >= assignment.days), "date",
               f"a date from {assignment.start.date()} to {last} (the assignment's window)")
    hour = np.zeros(len(frame), dtype=np.int64)
    if "hour" in frame.columns:
        number = _numbers(frame["hour"])
        refuse_first(path, frame, ~np.isin(number, np.arange(24)), "hour",
                   "an hour of the day, 0 to 23")
        hour = number.astype(np.int64)
    count = _numbers(frame["orders"])
    bad = ~np.isfinite(count) | (count < 0) | (count != np.round(count))
    refuse_first(path, frame, bad, "orders", "a whole number of orders >= 0")
    count = count.astype(np.int64)
    key = (user if by_user else pool) * (assignment.days * 24) + day * 24 + hour
    repeated = pd.Series(key).duplicated().to_numpy()
    column = "hour" if "hour" in frame.columns else "date"
    refuse_first(path, frame, repeated, column, "a single row per "
               + ("user" if by_user else "pool") + (", date and hour" if column == "hour"
                                                     else " and date"))
    tick = (day * 24 + hour) // assignment.tick_hours
    user_day = np.zeros((n_users, assignment.days), dtype=np.int64)
    if by_user:
        np.add.at(user_day, (user, day), count)
    pool_tick = np.zeros((n_pools, assignment.n_ticks), dtype=np.int64)
    np.add.at(pool_tick, (pool, tick), count)
    flows = {}
    if outcome == "revenue":
        flows = _revenue_flows(path, frame, assignment, user if by_user else None, pool, day,
                               tick)
    elif outcome == "conversion":
        flows = (_conversion_from_orders(assignment, user, day, hour, count) if by_user
                 else _conversion_from_pools(path, frame, assignment, pool, tick))
    return panel_from_counts(assignment, user_day=user_day, pool_tick=pool_tick, **flows)


def _revenue_flows(path: Path, frame: pd.DataFrame, assignment: Assignment,
                   user: np.ndarray | None, pool: np.ndarray, day: np.ndarray, tick: np.ndarray
                   ) -> dict:
    """Return revenue per user-day (user rows) and per pool-tick from the ``revenue`` column."""
    value = column_floats(frame["revenue"])
    refuse_first(path, frame, ~np.isfinite(value) | (value < 0), "revenue",
                 "a number >= 0 (the value of the row's fulfilled orders)")
    user_days = np.zeros((assignment.user_ids.size, assignment.days))
    if user is not None:
        np.add.at(user_days, (user, day), value)
    pool_ticks = np.zeros((assignment.pool_ids.size, assignment.n_ticks))
    np.add.at(pool_ticks, (pool, tick), value)
    return {"outcome_days": user_days, "pool_outcome": pool_ticks}


def _conversion_from_orders(assignment: Assignment, user: np.ndarray, day: np.ndarray,
                            hour: np.ndarray, count: np.ndarray) -> dict:
    """Return conversion flows: 1 in the day and tick of each user's first row with orders."""
    n_users = assignment.user_ids.size
    first = np.full(n_users, assignment.days * 24, dtype=np.int64)  # hour of the horizon
    ordered = count > 0
    np.minimum.at(first, user[ordered], (day * 24 + hour)[ordered])
    converted = np.flatnonzero(first < assignment.days * 24)
    user_days = np.zeros((n_users, assignment.days))
    user_days[converted, first[converted] // 24] = 1.0
    pool_ticks = np.zeros((assignment.pool_ids.size, assignment.n_ticks))
    np.add.at(pool_ticks, (assignment.pool_of_user[converted],
                           first[converted] // assignment.tick_hours), 1.0)
    return {"outcome_days": user_days, "pool_outcome": pool_ticks}


def _conversion_from_pools(path: Path, frame: pd.DataFrame, assignment: Assignment,
                           pool: np.ndarray, tick: np.ndarray) -> dict:
    """Return conversion flows per pool-tick from the ``conversions`` column."""
    number = _numbers(frame["conversions"])
    refuse_first(path, frame, ~np.isfinite(number) | (number < 0) | (number != np.round(number)),
                 "conversions", "a whole number of users >= 0")
    running = pd.Series(number).groupby(pool).cumsum().to_numpy()
    users = np.bincount(assignment.pool_of_user, minlength=assignment.pool_ids.size)
    refuse_first(path, frame, running > users[pool], "conversions",
                 "at most the pool's number of users in assignment.csv, summed over its rows "
                 "(each user converts once)")
    pool_ticks = np.zeros((assignment.pool_ids.size, assignment.n_ticks))
    np.add.at(pool_ticks, (pool, tick), number)
    return {"pool_outcome": pool_ticks}
