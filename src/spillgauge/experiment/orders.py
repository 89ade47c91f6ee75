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
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from spillgauge.errors import ScenarioError
from spillgauge.experiment.assignment import Assignment
from spillgauge.experiment.csv_checks import column_codes, file_error, refuse_first
from spillgauge.panel import OutcomePanel

__all__ = ["read_orders", "panel_from_counts"]

_COLUMNS = ("user_id", "pool_id", "date", "hour", "orders")


def _numbers(column: pd.Series) -> np.ndarray:
    """Return a column as floats (NaN where it is not a number); integers take the fast path."""
    try:
        return column.astype(np.int64).to_numpy(dtype=float)
    except (ValueError, TypeError, OverflowError):
        return pd.to_numeric(column, errors="coerce").to_numpy(float)


def panel_from_counts(assignment: Assignment, *, user_day: np.ndarray, pool_tick: np.ndarray
                      ) -> OutcomePanel:
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

    Orders seen are orders fulfilled: ``demanded`` equals ``fulfilled`` and no
    order is lost (a team's orders table holds what was sold); stock is unknown (0).
    """
    user_day = np.asarray(user_day).astype(np.int32)
    pool_tick = np.asarray(pool_tick).astype(np.int64)
    return OutcomePanel(fulfilled=user_day, demanded=user_day,
                        pool_of_user=assignment.pool_of_user, history=assignment.history,
                        pool_fulfilled=pool_tick, pool_demanded=pool_tick,
                        pool_lost=np.zeros_like(pool_tick), pool_stock=np.zeros_like(pool_tick),
                        tick_hours=assignment.tick_hours)


def read_orders(path: str | Path, assignment: Assignment) -> OutcomePanel:
    """Read an orders CSV file into the outcome panel of the assignment's market.

    Raises
    ------
    ScenarioError
        For a missing or unknown column, an unknown user or pool, a user's row
        naming another pool than the assignment, a date outside the window, an
        hour outside 0-23, a negative or non-integer count, or a duplicate row;
        naming the file, line, column and value.
    """
    path = Path(path)
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False, skip_blank_lines=False,
                            encoding="utf-8-sig", skipinitialspace=True)
    except (OSError, UnicodeDecodeError, pd.errors.ParserError,
            pd.errors.EmptyDataError) as exc:
        raise ScenarioError(str(path), "a readable CSV file of orders",
                            f"{type(exc).__name__}: {str(exc).splitlines()[0]}") from None
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
    why = {"hour": ": this design's arms change within a day, so its estimator needs the "
                   "hour of each order", "user_id": ": this design keeps each user in one "
                   "arm, so its estimator needs each user's orders"}
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
    return panel_from_counts(assignment, user_day=user_day, pool_tick=pool_tick)
