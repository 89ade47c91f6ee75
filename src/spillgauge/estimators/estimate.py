"""Estimate: the small result every estimator returns, with typed design-specific extras."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Estimate", "InterferenceDiagnostic", "LaunchDiagnostic"]


@dataclass(frozen=True, slots=True)
class InterferenceDiagnostic:
    """What a test of interference adds to its estimate (Saveski et al. 2017).

    Parameters
    ----------
    user_arm_point, cluster_arm_point : float
        The two halves' estimates of the effect (orders per user).
    delta, delta_se : float
        ``user_arm_point - cluster_arm_point`` and its standard error.
    statistic : float
        ``delta / delta_se``.
    p_value : float
        Two-sided p-value of "no interference".
    rejects : bool
        Whether the test rejects at the estimate's level.
    rejects_chebyshev : bool
        Whether ``|statistic| >= 1 / sqrt(alpha)`` (distribution-free, level at most alpha).
    """

    user_arm_point: float
    cluster_arm_point: float
    delta: float
    delta_se: float
    statistic: float
    p_value: float
    rejects: bool
    rejects_chebyshev: bool


@dataclass(frozen=True, slots=True)
class LaunchDiagnostic:
    """What the analysis of a launch shows of its own footing (NaN where it does not apply).

    Parameters
    ----------
    smd_before, smd_after : float
        Standardized mean difference of the users' pre-period orders between those
        who opted in and the others, before and after matching or weighting
        (Austin 2009; ``|SMD| < 0.1`` is the usual rule for balance).
    off_support_share : float
        Share of opted-in users whose propensity score lies outside the range of
        the others' scores (no overlap).
    unmatched_share : float
        Share of opted-in users left out by matching (no control inside the caliper).
    pre_rmspe, post_rmspe : float
        Root mean squared gap between the launched pools' daily orders per user and
        their synthetic comparison before and after the launch (Abadie, Diamond &
        Hainmueller 2010); a post/pre ratio near 1 means no visible effect.
    """

    smd_before: float = float("nan")
    smd_after: float = float("nan")
    off_support_share: float = float("nan")
    unmatched_share: float = float("nan")
    pre_rmspe: float = float("nan")
    post_rmspe: float = float("nan")


@dataclass(frozen=True, slots=True)
class Estimate:
    """One design's estimate of its estimand in one world.

    All values are on the GTE's scale: the study's outcome (fulfilled orders by
    default) per user over the horizon.

    Parameters
    ----------
    point : float
        The estimate.
    standard_error : float
        Its estimated standard error.
    ci_low, ci_high : float
        Confidence interval at level ``confidence``.
    method : str
        Full name of the estimator, e.g. ``"difference_in_means"``.
    n_units : int
        Number of units (users, clusters, blocks) the estimate used.
    confidence : float
        Level of the interval (NaN when the estimator did not say).
    degrees_of_freedom : float
        Degrees of freedom of the t reference distribution of the interval
        (``inf`` for a normal interval; NaN when not stated).
    p_value : float
        Two-sided p-value of "no effect" (NaN when not computed).
    diagnostic : InterferenceDiagnostic or LaunchDiagnostic, optional
        A test of interference's statistics, or a launch's balance and fit.
    randomization_p_value : float
        Fisher's randomization p-value of "no effect on anyone", from re-draws of the
        design's own assignment, when the design asks for ``inference =
        "randomization"`` (NaN otherwise). ``p_value`` stays the analytic one.
    control_mean : float
        The estimator's estimate of the mean outcome per user over the horizon with
        no one treated: what the relative effect divides by (NaN when the
        estimator does not give one). See :mod:`spillgauge.estimators.relative`.
    control_mean_se : float
        Standard error of ``control_mean``.
    control_covariance : float
        Estimated covariance of ``point`` and ``control_mean`` (for the delta method).
    """

    point: float
    standard_error: float
    ci_low: float
    ci_high: float
    method: str
    n_units: int = 0
    confidence: float = float("nan")
    degrees_of_freedom: float = float("nan")
    p_value: float = float("nan")
    diagnostic: InterferenceDiagnostic | LaunchDiagnostic | None = None
    randomization_p_value: float = float("nan")
    control_mean: float = float("nan")
    control_mean_se: float = float("nan")
    control_covariance: float = float("nan")
