"""Input checks and interval arithmetic shared by the estimator families (private).

Every public estimator validates with its module's ``_check_inputs``, which
starts with :func:`check_common_inputs`, and builds its result with
:func:`build_estimate` or, for legal but degenerate input, :func:`degenerate_estimate`.
"""

from __future__ import annotations

import math
import numbers
import warnings

import numpy as np
from scipy import stats

from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.estimators.estimate import Estimate
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = [
    "check_common_inputs",
    "check_static",
    "check_over_time",
    "build_estimate",
    "degenerate_estimate",
    "neyman_variance",
]


def check_common_inputs(panel: object, schedule: object, confidence: object,
                        method: str) -> float:
    """Check what every estimator needs and return ``confidence`` as a float.

    Raises
    ------
    TypeError
        If ``panel`` is not an :class:`OutcomePanel` or ``schedule`` not an
        :class:`AssignmentSchedule`.
    ValueError
        If the two describe different numbers of users, or ``confidence`` is not a
        real number strictly between 0 and 1.

    Examples
    --------
    >>> panel = OutcomePanel.from_arrays(fulfilled=np.array([1, 2]))
    >>> schedule = AssignmentSchedule.fixed(n_users=3, n_ticks=1, is_treated=True)
    >>> check_common_inputs(panel, schedule, 0.95, "difference_in_means")
    Traceback (most recent call last):
    ...
    ValueError: difference_in_means: panel has 2 users but schedule has 3; both must ...
    """
    if not isinstance(panel, OutcomePanel):
        raise TypeError(f"{method}: panel must be an OutcomePanel; got {type(panel).__name__}")
    if not isinstance(schedule, AssignmentSchedule):
        raise TypeError(f"{method}: schedule must be an AssignmentSchedule; "
                        f"got {type(schedule).__name__}")
    if panel.n_users != schedule.n_users:
        raise ValueError(f"{method}: panel has {panel.n_users} users but schedule has "
                         f"{schedule.n_users}; both must describe the same users")
    is_real = isinstance(confidence, numbers.Real) and not isinstance(confidence, (bool, np.bool_))
    if not is_real or not 0.0 < float(confidence) < 1.0:
        raise ValueError(f"{method}: confidence must be a number strictly between 0 and 1; "
                         f"got {confidence!r}")
    return float(confidence)


def check_over_time(panel: OutcomePanel, schedule: AssignmentSchedule, method: str, *,
                    allow_market: bool) -> None:
    """Raise ValueError unless a time-varying schedule fits the panel.

    Both must cover the same ticks, and the units must be the panel's pools
    (``schedule.unit_of_user == panel.pool_of_user``; trailing pools without
    users may have no unit) or, when ``allow_market``, the whole market.
    """
    if panel.n_ticks != schedule.n_ticks:
        raise ValueError(f"{method}: panel has {panel.n_ticks} ticks but schedule has "
                         f"{schedule.n_ticks}; both must cover the same horizon")
    if allow_market and schedule.unit_kind == "market":
        if schedule.n_units != 1:
            raise ValueError(f"{method}: a market schedule must have one unit; got "
                             f"{schedule.n_units}")
    elif schedule.unit_kind == "pool":
        if schedule.n_units > panel.n_pools or not np.array_equal(panel.pool_of_user,
                                                                   schedule.unit_of_user):
            raise ValueError(f"{method}: a pool schedule's units must be the panel's pools "
                             "(schedule.unit_of_user == panel.pool_of_user)")
    else:
        allowed = "'market' or 'pool'" if allow_market else "'pool'"
        raise ValueError(f"{method} needs units {allowed}; got "
                         f"unit_kind={schedule.unit_kind!r}")


def check_static(schedule: AssignmentSchedule, method: str) -> None:
    """Raise ValueError unless every unit keeps one arm over the whole horizon."""
    if not schedule.is_static:
        raise ValueError(f"{method} needs a static schedule (one period); got "
                         f"{schedule.n_periods} periods; analyse switchbacks with "
                         "switchback_difference")


def build_estimate(point: float, variance: float, *, confidence: float, method: str,
                   n_units: int, df: float | None = None) -> Estimate:
    """Return an :class:`Estimate` with the interval ``point +/- q * sqrt(variance)``.

    ``q`` is the ``(1 + confidence) / 2`` quantile of the standard normal
    distribution, or of Student's t with ``df`` degrees of freedom when ``df`` is
    given.

    Examples
    --------
    >>> est = build_estimate(3.0, 2 / 3, confidence=0.95, method="difference_in_means",
    ...                      n_units=6)
    >>> round(est.standard_error, 6), round(est.ci_high - est.point, 6)
    (0.816497, 1.600304)
    """
    se = math.sqrt(max(float(variance), 0.0))
    level = (1.0 + confidence) / 2.0
    quantile = float(stats.norm.ppf(level) if df is None else stats.t.ppf(level, df))
    return Estimate(point=float(point), standard_error=se, ci_low=float(point) - quantile * se,
                    ci_high=float(point) + quantile * se, method=method, n_units=int(n_units))


def degenerate_estimate(method: str, reason: str, *, n_units: int,
                        point: float = math.nan) -> Estimate:
    """Warn with :class:`DegenerateEstimateWarning` and return an estimate with NaN fields.

    ``point`` stays NaN unless the point estimate is still defined (then only the
    standard error and the interval are NaN).

    Examples
    --------
    >>> import warnings
    >>> with warnings.catch_warnings(record=True) as caught:
    ...     warnings.simplefilter("always")
    ...     est = degenerate_estimate("difference_in_means", "the control arm is empty",
    ...                               n_units=3)
    >>> est.point, est.standard_error, caught[0].category.__name__
    (nan, nan, 'DegenerateEstimateWarning')
    """
    warnings.warn(f"{method}: {reason}; returning NaN", DegenerateEstimateWarning, stacklevel=3)
    return Estimate(point=float(point), standard_error=math.nan, ci_low=math.nan,
                    ci_high=math.nan, method=method, n_units=int(n_units))


def neyman_variance(treated_values: np.ndarray, control_values: np.ndarray) -> float:
    """Return ``s1^2 / n1 + s0^2 / n0`` (sample variances with ``ddof=1``).

    Examples
    --------
    >>> neyman_variance(np.array([4.0, 5.0, 6.0]), np.array([1.0, 2.0, 3.0]))
    0.6666666666666666
    """
    return float(np.var(treated_values, ddof=1) / treated_values.size
                 + np.var(control_values, ddof=1) / control_values.size)
