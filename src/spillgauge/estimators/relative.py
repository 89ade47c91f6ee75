"""The effect as a share of the control mean: a ratio of two estimates, its SE and interval.

An estimator that can say what its effect is relative to fills the three
control fields of its :class:`~spillgauge.estimators.estimate.Estimate`
(:func:`with_control_mean`): ``control_mean`` (its estimate of the mean outcome
per user over the horizon with no one treated: the denominator), that
estimate's standard error, and its covariance with the effect's point estimate.
:func:`relative_effect` turns them into the relative effect, its standard error
(delta method) and interval (Fieller's).
"""

from __future__ import annotations

import dataclasses
import math
from typing import NamedTuple

from scipy import stats

from spillgauge.estimators.estimate import Estimate

__all__ = ["RelativeEffect", "fieller_interval", "relative_effect", "with_control_mean"]


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
    """Return the estimate's effect relative to its control mean, with Fieller's interval.

    Returns
    -------
    RelativeEffect
        NaN fields when the estimator gave no control mean or it is not positive;
        the interval is NaN when the estimate has no standard error, or when the
        control mean is not itself distinguishable from 0 at the interval's level
        (Fieller's set is then unbounded).

    Notes
    -----
    With ``D`` the effect and ``C`` the control mean, ``R = D / C``. Its standard
    error is the delta method's for a ratio of two estimates (Casella & Berger
    2002, sec. 5.5.4; Deng, Knoblich & Lu 2018),

    ``Var(R) ~= [Var(D) - 2 R Cov(D, C) + R^2 Var(C)] / C^2``.

    The interval is Fieller's (Fieller 1954): the relative effects ``theta`` that
    the test of ``D - theta C = 0`` does not reject,

    ``(D - theta C)^2 <= q^2 [Var(D) - 2 theta Cov(D, C) + theta^2 Var(C)]``,

    with ``q`` the quantile of the estimate's own reference distribution
    (Student's t with its degrees of freedom, or the normal) at its level: the
    roots of a quadratic, bounded when ``C^2 > q^2 Var(C)``. Unlike ``R +/- q se``
    it stays right when the control mean is noisy (a switchback's few control
    blocks), and it covers 0 exactly when the effect's own interval does. When
    ``Var(C) = 0`` it is the delta method's interval.

    Examples
    --------
    Treated mean 6 (variance 0.5), control mean 4 (variance 0.25): R = 0.5 and
    ``Var(R) = (0.5 + 1.5^2 * 0.25) / 16``.

    >>> est = Estimate(point=2.0, standard_error=0.75 ** 0.5, ci_low=0.0, ci_high=0.0,
    ...                method="difference_in_means", confidence=0.95)
    >>> rel = relative_effect(with_control_mean(est, 4.0, 0.25))
    >>> rel.point, round(rel.standard_error ** 2, 6), round((0.5 + 2.25 * 0.25) / 16, 6)
    (0.5, 0.066406, 0.066406)
    >>> # by hand, q = 1.96: a = 16 - q^2/4 = 15.0396, b = 8 + q^2/4 = 8.9604,
    >>> # e = 4 - 0.75 q^2 = 1.1189, roots (b -/+ sqrt(b^2 - a e)) / a
    >>> round(rel.ci_low, 4), round(rel.ci_high, 4)  # the delta method's: -0.005, 1.005
    (0.0661, 1.1255)
    """
    d, c = float(estimate.point), float(estimate.control_mean)
    nan = float("nan")
    if not (math.isfinite(c) and c > 0 and math.isfinite(d)):
        return RelativeEffect(nan, nan, nan, nan)
    ratio = d / c
    var_d, var_c = estimate.standard_error ** 2, estimate.control_mean_se ** 2
    covariance = estimate.control_covariance
    variance = (var_d - 2 * ratio * covariance + ratio ** 2 * var_c) / c ** 2
    if not (math.isfinite(variance) and variance >= 0):
        return RelativeEffect(ratio, nan, nan, nan)
    confidence = estimate.confidence if math.isfinite(estimate.confidence) else 0.95
    df = estimate.degrees_of_freedom
    level = (1 + confidence) / 2
    q = float(stats.t.ppf(level, df) if math.isfinite(df) and df > 0
              else stats.norm.ppf(level))
    low, high = fieller_interval(d, c, var_d, var_c, covariance, q)
    return RelativeEffect(ratio, math.sqrt(variance), low, high)


def fieller_interval(d: float, c: float, var_d: float, var_c: float, covariance: float,
                     q: float) -> tuple[float, float]:
    """Return Fieller's interval for ``d / c``: where ``(d - t c)^2 <= q^2 Var(d - t c)``.

    ``Var(d - t c) = var_d - 2 t covariance + t^2 var_c``. The set is
    ``{t : a t^2 - 2 b t + e <= 0}`` with ``a = c^2 - q^2 var_c``,
    ``b = d c - q^2 covariance`` and ``e = d^2 - q^2 var_d``: the interval between
    the roots when ``a > 0``, otherwise unbounded (NaN, NaN) (Fieller 1954).

    >>> fieller_interval(2.0, 4.0, 1.0, 0.0, 0.0, 2.0)  # var_c = 0: 0.5 +/- 2 * 1 / 4
    (0.0, 1.0)
    >>> fieller_interval(2.0, 1.0, 1.0, 1.0, 0.0, 2.0)  # c within 2 SE of 0
    (nan, nan)
    """
    nan = float("nan")
    a = c * c - q * q * var_c
    b = d * c - q * q * covariance
    e = d * d - q * q * var_d
    discriminant = b * b - a * e
    if not (math.isfinite(discriminant) and a > 0 and discriminant >= 0):
        return nan, nan
    root = math.sqrt(discriminant)
    return (b - root) / a, (b + root) / a
