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
    "cr2_arm_difference",
    "satterthwaite_df",
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
    # the distribution's methods with df as an argument: freezing one costs far more than its use
    shape = () if df is None else (df,)
    reference = stats.norm if df is None else stats.t
    quantile = float(reference.ppf(level, *shape))
    p_value = float(2 * reference.sf(abs(point) / se, *shape)) if se > 0 else math.nan
    return Estimate(point=float(point), standard_error=se, ci_low=float(point) - quantile * se,
                    ci_high=float(point) + quantile * se, method=method, n_units=int(n_units),
                    confidence=float(confidence),
                    degrees_of_freedom=math.inf if df is None else float(df), p_value=p_value)


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
    warnings.warn(f"{method}: {reason}", DegenerateEstimateWarning, stacklevel=3)
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


def cr2_arm_difference(residual_sums: np.ndarray, sizes: np.ndarray,
                       is_treated: np.ndarray) -> tuple[float, float]:
    """Return the CR2 variance of a difference of two arm means over clusters, and its df.

    Parameters
    ----------
    residual_sums : ndarray of float, shape (G,)
        Each cluster's residual sum ``e_g = T_g - N_g * mean_a`` (``mean_a`` its arm's
        user-weighted mean).
    sizes : ndarray of float, shape (G,)
        Users per cluster ``N_g`` (all > 0).
    is_treated : ndarray of bool, shape (G,)

    Returns
    -------
    variance, df : float
        NaN for both when an arm has fewer than 2 clusters.

    Notes
    -----
    The difference of the arms' user-weighted means is the OLS slope of
    ``y ~ 1 + z`` over users. Its CR2 variance (Bell & McCaffrey 2002) adjusts
    each cluster's residuals by ``(I - H_gg)^(-1/2)``; here ``H_gg = J / N_a``
    (``N_a`` the users of the cluster's arm), whose inverse square root scales the
    residual sum by ``(1 - N_g / N_a)^(-1/2)``:

    ``V = sum_a sum_{g in a} e_g^2 / ((1 - N_g / N_a) N_a^2)``.

    With equal clusters this is each arm's own ``G_a / (G_a - 1)`` factor (the
    Neyman variance of cluster means). The degrees of freedom are Bell and
    McCaffrey's Satterthwaite approximation under the working model of
    independent, equal-variance users (Imbens & Kolesar 2016, eq. for ``K_BM``;
    Pustejovsky & Tipton 2018): writing ``V = y' M y``,
    ``df = tr(M)^2 / tr(M^2)``, which uses the Gram matrix
    ``K_gh = N_g [g = h] - N_g N_h / N_a`` within each arm. Equal arms of equal
    clusters give ``G - 2``. ``K`` is a diagonal minus a rank-one matrix, so both
    traces are sums over clusters: ``O(G)`` time and memory.

    Examples
    --------
    Four equal clusters, two per arm: each arm's factor is 2 and ``df = 2``.

    >>> v, df = cr2_arm_difference(np.array([1.0, -1.0, 2.0, -2.0]), np.full(4, 2.0),
    ...                            np.array([True, True, False, False]))
    >>> round(v, 6), round(df, 6)  # 2 * (1 + 1) / 16 + 2 * (4 + 4) / 16
    (1.25, 2.0)
    """
    variance, trace, trace_square = 0.0, 0.0, 0.0
    for arm in (is_treated, ~is_treated):
        if int(arm.sum()) < 2:
            return math.nan, math.nan
        n_g = sizes[arm].astype(float)
        n_a = float(n_g.sum())
        weight = 1.0 / ((1.0 - n_g / n_a) * n_a ** 2)
        variance += float(np.sum(weight * residual_sums[arm] ** 2))
        # K = diag(N_g) - N N' / N_a, never formed: tr(W K) and
        # sum_gh w_g w_h K_gh^2 = sum_g w_g^2 (N_g^2 - 2 N_g^3 / N_a) + (sum_g w_g N_g^2)^2 / N_a^2
        trace += float(np.sum(weight * (n_g - n_g ** 2 / n_a)))
        trace_square += float(np.sum(weight ** 2 * (n_g ** 2 - 2 * n_g ** 3 / n_a))
                              + np.sum(weight * n_g ** 2) ** 2 / n_a ** 2)
    return variance, trace ** 2 / trace_square


def satterthwaite_df(parts: list[tuple[float, float]]) -> float:
    """Return Satterthwaite's degrees of freedom of a sum of independent variance parts.

    ``parts`` holds ``(variance, df)`` pairs; the result is
    ``(sum v)^2 / sum (v^2 / df)`` (Satterthwaite 1946; Welch 1947).

    >>> round(satterthwaite_df([(1.0, 4.0), (1.0, 4.0)]), 6)
    8.0
    """
    total = sum(v for v, _ in parts)
    return total ** 2 / sum(v ** 2 / df for v, df in parts)
