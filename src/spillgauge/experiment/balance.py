"""Balance of an assignment: pre-period orders by arm and their standardized mean difference."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from spillgauge.formatting import format_number, format_quantity

__all__ = ["Balance", "standardized_mean_difference", "assignment_balance", "balance_text"]


def standardized_mean_difference(treated: np.ndarray, control: np.ndarray) -> float:
    """Return ``(mean_T - mean_C) / sqrt((s_T^2 + s_C^2) / 2)`` for a continuous covariate.

    Sample variances use ``ddof=1``; NaN when an arm has fewer than two values or
    both variances are zero. Austin (2009), "Balance diagnostics for comparing
    the distribution of baseline covariates between treatment groups in
    propensity-score matched samples", Statistics in Medicine 28(25), the formula for a
    continuous covariate.

    >>> standardized_mean_difference(np.array([2.0, 4.0]), np.array([1.0, 3.0]))
    0.7071067811865475
    """
    treated, control = np.asarray(treated, float), np.asarray(control, float)
    if treated.size < 2 or control.size < 2:
        return math.nan
    pooled = (treated.var(ddof=1) + control.var(ddof=1)) / 2.0
    if pooled <= 0:
        return math.nan
    return float((treated.mean() - control.mean()) / math.sqrt(pooled))


@dataclass(frozen=True, slots=True)
class Balance:
    """Pre-period orders by arm.

    Attributes
    ----------
    n_users, n_units : tuple of int
        Users and randomization units in (control, treatment).
    mean, sd : tuple of float
        Mean and standard deviation (``ddof=1``) of pre-period orders per user.
    smd : float
        Standardized mean difference, treatment minus control (Austin 2009).
    """

    n_users: tuple[int, int]
    n_units: tuple[int, int]
    mean: tuple[float, float]
    sd: tuple[float, float]
    smd: float

    def to_dict(self) -> dict:
        """Return the table as plain data."""
        return {arm: {"users": self.n_users[i], "units": self.n_units[i], "mean": self.mean[i],
                      "sd": self.sd[i]} for i, arm in enumerate(("control", "treatment"))} | {
            "standardized_mean_difference": self.smd}


def assignment_balance(schedule, history: np.ndarray) -> Balance | None:
    """Return the balance of pre-period orders by arm; None when arms change over time.

    Parameters
    ----------
    schedule : AssignmentSchedule
    history : ndarray of float, shape (n_users,)
        Pre-period orders of each user.
    """
    if not schedule.is_static:
        return None
    treated = schedule.user_is_treated()
    history = np.asarray(history, dtype=float)
    arms = (history[~treated], history[treated])
    unit_treated = schedule.is_treated[:, 0]
    units_used = np.bincount(schedule.unit_of_user, minlength=schedule.n_units) > 0
    n_units = (int((units_used & ~unit_treated).sum()), int((units_used & unit_treated).sum()))
    mean = tuple(float(a.mean()) if a.size else math.nan for a in arms)
    sd = tuple(float(a.std(ddof=1)) if a.size > 1 else math.nan for a in arms)
    return Balance(n_users=(arms[0].size, arms[1].size), n_units=n_units, mean=mean, sd=sd,
                   smd=standardized_mean_difference(arms[1], arms[0]))


def balance_text(balance: Balance | None, unit_kind: str) -> str:
    """Return the balance table as text (a note when arms change over time)."""
    if balance is None:
        return ("balance: arms change over time (blocks), so there is no per-user table; "
                "see calendar.csv")
    units = unit_kind != "user"
    lines = ["pre-period orders per user, by arm:",
             f"  {'arm':<10} {'users':>8}" + (f" {unit_kind + 's':>10}" if units else "")
             + f" {'mean':>8} {'sd':>8}"]
    for i, arm in enumerate(("control", "treatment")):
        lines.append(f"  {arm:<10} {format_quantity(balance.n_users[i]):>8}"
                     + (f" {format_quantity(balance.n_units[i]):>10}" if units else "")
                     + f" {format_quantity(balance.mean[i], '{:.2f}'):>8}"
                     f" {format_quantity(balance.sd[i], '{:.2f}'):>8}")
    flag = "" if not math.isfinite(balance.smd) or abs(balance.smd) < 0.1 else \
        "  (above 0.1: a common rule of thumb for imbalance)"
    lines.append(f"  standardized mean difference: {format_number(balance.smd, sign=True)}{flag}")
    return "\n".join(lines)
