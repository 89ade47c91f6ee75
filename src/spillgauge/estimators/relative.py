"""The effect as a share of the control mean: a ratio of two estimates and its delta-method SE.

An estimator that can say what its effect is relative to fills the three
control fields of its :class:`~spillgauge.estimators.estimate.Estimate`
(:func:`with_control_mean`): ``control_mean`` (its estimate of the mean outcome
per user over the horizon with no one treated: the denominator), that
estimate's standard error, and its covariance with the effect's point estimate.
:func:`relative_effect` turns them into the relative effect, its standard error
and interval.
"""

from __future__ import annotations

import dataclasses
import math
from typing import NamedTuple

from scipy import stats

from spillgauge.estimators.estimate import Estimate

__all__ = ["RelativeEffect", "relative_effect", "with_control_mean"]


class RelativeEffect(NamedTuple):
    """The effect as a share of the control mean: ``point = effect / control_mean``."""

    point: float
    standard_error: float
    ci_low: float
    ci_high: float


def with_control_mean(estimate: Estimate, control_mean: float, control_variance: float,
                      covariance: float | None = None) -> Estimate:
    """Return ``estimate`` with its control-mean fields filled.

    Parameters
    ----------
    estimate : Estimate
    control_mean : float
        The estimator's estimate of the mean outcome per user with no one treated.
    control_variance : float
        Its estimated variance.
    covariance : float, optional
        Estimated covariance of the effect's point estimate and ``control_mean``;
        by default ``-control_variance``, right when the effect is a treated-arm
        mean minus an independent control-arm mean (``Cov(T - C, C) = -Var(C)``).
    """
    variance = float(control_variance)
    covariance = -variance if covariance is None else float(covariance)
    return dataclasses.replace(estimate, control_mean=float(control_mean),
                               control_mean_se=math.sqrt(max(variance, 0.0)),
                               control_covariance=covariance)


def relative_effect(estimate: Estimate) -> RelativeEffect:
    """Return the estimate's effect relative to its control mean, with a delta-method interval.

    Returns
    -------
    RelativeEffect
        NaN fields when the estimator gave no control mean or it is not positive;
        the interval is NaN when the estimate has no standard error.

    Notes
    -----
    With ``D`` the effect and ``C`` the control mean, ``R = D / C`` and, by the
    delta method for a ratio of two estimates (Casella & Berger 2002, sec. 5.5.4;
    Deng, Knoblich & Lu 2018, "Applying the delta method in metric analytics"),

    ``Var(R) ~= [Var(D) - 2 R Cov(D, C) + R^2 Var(C)] / C^2``.

    For a difference of independent arm means ``T - C`` this is
    ``[Var(T) + (T / C)^2 Var(C)] / C^2``, the usual interval for a relative lift
    ``T / C - 1``. The interval is ``R +/- q * se`` with the estimate's own
    reference distribution (Student's t with its degrees of freedom, or the
    normal) at its confidence level.

    Examples
    --------
    Treated mean 6 (variance 0.5), control mean 4 (variance 0.25): R = 0.5 and
    ``Var(R) = (0.5 + 1.5^2 * 0.25) / 16``.

    >>> est = Estimate(point=2.0, standard_error=0.75 ** 0.5, ci_low=0.0, ci_high=0.0,
    ...                method="difference_in_means", confidence=0.95)
    >>> rel = relative_effect(with_control_mean(est, 4.0, 0.25))
    >>> rel.point, round(rel.standard_error ** 2, 6), round((0.5 + 2.25 * 0.25) / 16, 6)
    (0.5, 0.066406, 0.066406)
    """
    d, c = float(estimate.point), float(estimate.control_mean)
    nan = float("nan")
    if not (math.isfinite(c) and c > 0 and math.isfinite(d)):
        return RelativeEffect(nan, nan, nan, nan)
    ratio = d / c
    variance = (estimate.standard_error ** 2 - 2 * ratio * estimate.control_covariance
                + ratio ** 2 * estimate.control_mean_se ** 2) / c ** 2
    confidence = estimate.confidence if math.isfinite(estimate.confidence) else 0.95
    df = estimate.degrees_of_freedom
    t_shape = math.isfinite(df) and df > 0
    if not (math.isfinite(variance) and variance >= 0):
        return RelativeEffect(ratio, nan, nan, nan)
    se = math.sqrt(variance)
    level = (1 + confidence) / 2
    half = float(stats.t.ppf(level, df) if t_shape else stats.norm.ppf(level)) * se
    return RelativeEffect(ratio, se, ratio - half, ratio + half)
