"""Effect on the launched pools of a regional launch: pre/post, difference in differences,
synthetic control.

A few pools switch on at one time and stay on; nobody randomized which. Each
estimator works on the pool-day series of fulfilled orders per user and targets
the effect on the launched pools: the mean over their users of the orders the
launch added over the post-launch days.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import replace

import numpy as np
from scipy import optimize

from spillgauge.estimators._inference import (
    build_estimate,
    check_common_inputs,
    cr2_arm_difference,
    degenerate_estimate,
)
from spillgauge.estimators.estimate import Estimate, LaunchDiagnostic
from spillgauge.estimators.relative import with_control_mean
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["pool_day_series", "synthetic_control_weights", "simplex_least_squares",
           "placebo_sets", "placebo_variance", "placebo_rank_p_value", "group_series",
           "placebo_degrees_of_freedom", "pre_post_difference",
           "launch_difference_in_differences", "synthetic_control", "with_launch_control_mean",
           "PLACEBO_SETS"]


def pool_day_series(panel: OutcomePanel, schedule: AssignmentSchedule, method: str):
    """Return ``(series, users, launched, n_pre_days)`` of a launch's world.

    ``series`` has shape ``(n_pools, n_days)``: fulfilled orders per user and day
    of each pool with users; ``launched`` marks the pools treated after the
    launch. Raises ``ValueError`` unless the schedule is a launch: units are pools,
    two periods, the second starting on a day boundary, all control before it.
    """
    if schedule.unit_kind != "pool" or schedule.n_periods != 2:
        raise ValueError(f"{method} needs a launch schedule (pools, two periods)")
    ticks_per_day = 24 // panel.tick_hours
    launch_tick = int(schedule.period_start_ticks[1])
    if launch_tick % ticks_per_day or panel.n_ticks % ticks_per_day:
        raise ValueError(f"{method} needs the launch on a day boundary")
    if schedule.is_treated[:, 0].any():
        raise ValueError(f"{method} needs every pool in control before the launch")
    n_units = schedule.n_units
    daily = np.asarray(panel.pool_outcome, dtype=float)[:n_units]
    daily = daily.reshape(n_units, -1, ticks_per_day).sum(axis=2)
    users = panel.users_per_pool()[:n_units].astype(float)
    keep = users > 0
    series = daily[keep] / users[keep][:, None]
    return series, users[keep], schedule.is_treated[keep, 1], launch_tick // ticks_per_day


def _check_inputs(panel, schedule, confidence, method):
    confidence = check_common_inputs(panel, schedule, confidence, method)
    return (confidence, *pool_day_series(panel, schedule, method))


def _weighted_mean(values: np.ndarray, weights: np.ndarray) -> float:
    return float(np.sum(values * weights) / np.sum(weights))


def _cluster_variance(values: np.ndarray, weights: np.ndarray) -> float:
    """Variance of a weighted mean of independent pools' values (ratio estimator, HC1-like)."""
    g = values.size
    share = weights / weights.sum()
    mean = np.sum(share * values)
    return float(g / (g - 1) * np.sum(share ** 2 * (values - mean) ** 2))


def with_launch_control_mean(estimate: Estimate, series: np.ndarray, users: np.ndarray,
                             launched: np.ndarray, n_pre: int) -> Estimate:
    """Return ``estimate`` with the launched pools' counterfactual level as its control mean.

    Every launch estimator's effect is the launched pools' observed post-launch
    orders per user ``O`` minus its counterfactual for them: the pre level scaled
    to the post days (pre/post), that level moved by the other pools' change
    (DiD), the synthetic pools' post level (synthetic control, synthetic DiD). So
    the control mean is ``C = O - point``. ``O`` is observed, and it is also the
    launched pools' post-launch outcome the truth is computed from, so ``C``'s
    error against their all-control mean is minus the effect's error:
    ``Var(C) = Var(point)``, ``Cov(point, C) = -Var(point)`` (ours; then the
    delta method of :func:`~spillgauge.estimators.relative.relative_effect` gives
    ``se(R) = se(point) O / C^2``, and its Fieller interval is bounded while ``C``
    exceeds ``q se(point)``).
    """
    observed = float(group_series(series, users, launched)[n_pre:].sum())
    return with_control_mean(estimate, observed - estimate.point, estimate.standard_error ** 2)


def pre_post_difference(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                        confidence: float = 0.95) -> Estimate:
    """Estimate the effect on the launched pools by their after-minus-before change.

    Per launched pool ``p``: ``D_p = mean_post(y_pd) - mean_pre(y_pd)``; the
    estimate is the user-weighted mean of ``D_p`` times the post-launch days. The
    SE treats pools as independent clusters (t with ``G - 1`` df); it does not see
    market-wide changes (a trend, a shock), which bias the estimate itself.
    """
    method = "pre_post_difference"
    confidence, series, users, launched, n_pre = _check_inputs(panel, schedule, confidence,
                                                               method)
    n_post = series.shape[1] - n_pre
    change = series[:, n_pre:].mean(axis=1) - series[:, :n_pre].mean(axis=1)
    g = int(launched.sum())
    if g < 2:
        return degenerate_estimate(method, "fewer than two launched pools", n_units=g)
    point = _weighted_mean(change[launched], users[launched]) * n_post
    variance = _cluster_variance(change[launched], users[launched]) * n_post ** 2
    estimate = build_estimate(point, variance, confidence=confidence, method=method, n_units=g,
                              df=g - 1)
    return with_launch_control_mean(estimate, series, users, launched, n_pre)


def launch_difference_in_differences(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                                     confidence: float = 0.95) -> Estimate:
    """Estimate the effect on the launched pools by difference in differences.

    ``(mean_launched D_p - mean_other D_p) x post days``, user-weighted, with
    ``D_p`` each pool's after-minus-before change: the two-way fixed-effects
    estimate of a single launch date (Angrist & Pischke 2009, ch. 5). SE: pools
    as clusters (Bertrand, Duflo & Mullainathan 2004) with the CR2 variance and
    Bell-McCaffrey degrees of freedom of a difference of two user-weighted means
    (:func:`~spillgauge.estimators._inference.cr2_arm_difference`; Bell &
    McCaffrey 2002, Imbens & Kolesar 2016), which keep their level with few
    launched pools of unequal size.
    """
    method = "launch_difference_in_differences"
    confidence, series, users, launched, n_pre = _check_inputs(panel, schedule, confidence,
                                                               method)
    n_post = series.shape[1] - n_pre
    change = series[:, n_pre:].mean(axis=1) - series[:, :n_pre].mean(axis=1)
    g1, g0 = int(launched.sum()), int((~launched).sum())
    if g1 < 2 or g0 < 2:
        return degenerate_estimate(method, "fewer than two pools in a group", n_units=g1 + g0)
    mean1 = _weighted_mean(change[launched], users[launched])
    mean0 = _weighted_mean(change[~launched], users[~launched])
    residual_sums = users * (change - np.where(launched, mean1, mean0))
    variance, df = cr2_arm_difference(residual_sums, users, launched)
    estimate = build_estimate((mean1 - mean0) * n_post, variance * n_post ** 2,
                              confidence=confidence, method=method, n_units=g1 + g0, df=df)
    return with_launch_control_mean(estimate, series, users, launched, n_pre)


PLACEBO_SETS = 200  # placebo launches per estimate (Arkhangelsky et al. 2021 use 200 too)
_PLACEBO_SEED = 20_210_401  # a fixed table of random sets: the same data give the same answer


def placebo_sets(n_units: int, size: int, *, count: int = PLACEBO_SETS) -> np.ndarray:
    """Return sets of ``size`` of ``n_units`` units for placebo launches, shape ``(n, size)``.

    Every set when there are at most ``count`` of them (in lexicographic order);
    otherwise ``count`` sets drawn uniformly from a fixed seed, so an estimator
    that uses them stays a deterministic function of its data.

    >>> placebo_sets(4, 2).tolist()
    [[0, 1], [0, 2], [0, 3], [1, 2], [1, 3], [2, 3]]
    >>> placebo_sets(40, 5).shape
    (200, 5)
    """
    if math.comb(n_units, size) <= count:
        return np.array(list(itertools.combinations(range(n_units), size)),
                        dtype=np.int64).reshape(-1, size)
    rng = np.random.default_rng(_PLACEBO_SEED)
    return np.sort(np.argsort(rng.random((count, n_units)), axis=1)[:, :size], axis=1)


def simplex_least_squares(matrix: np.ndarray, rhs: np.ndarray, *, ridge: float = 0.0
                          ) -> np.ndarray:
    """Return ``w >= 0``, ``sum w = 1`` minimising ``||matrix w - rhs||^2 + ridge ||w||^2``.

    Parameters
    ----------
    matrix : ndarray, shape (n_rows, n_weights)
    rhs : ndarray, shape (n_rows,)
    ridge : float
        Non-negative ridge penalty on the weights.

    Notes
    -----
    Non-negative least squares (Lawson & Hanson 1974; ``scipy.optimize.nnls``) on
    the rows ``[matrix; sqrt(ridge) I]``, with the sum-to-one constraint as a heavily
    weighted extra row, then rescaled to sum exactly to 1.

    >>> simplex_least_squares(np.eye(2), np.array([1.0, 1.0])).round(9).tolist()
    [0.5, 0.5]
    """
    matrix = np.asarray(matrix, dtype=float)
    rhs = np.asarray(rhs, dtype=float)
    n = matrix.shape[1]
    scale = max(float(np.abs(matrix).max(initial=0.0)), float(np.abs(rhs).max(initial=0.0)),
                math.sqrt(ridge), 1e-12)
    penalty = 1e4 * scale * math.sqrt(matrix.shape[0])
    rows = [matrix, math.sqrt(ridge) * np.eye(n)] if ridge > 0 else [matrix]
    stacked = np.vstack([*rows, np.full(n, penalty)])
    target = np.concatenate([rhs, np.zeros(n if ridge > 0 else 0), [penalty]])
    weights, _ = optimize.nnls(stacked, target, maxiter=50 * n + 100)
    total = weights.sum()
    return weights / total if total > 0 else np.full(n, 1.0 / n)


def synthetic_control_weights(target: np.ndarray, donors: np.ndarray) -> np.ndarray:
    """Return donor weights ``w >= 0``, ``sum w = 1`` minimising ``||target - donors' w||^2``.

    Parameters
    ----------
    target : ndarray, shape (n_periods,)
    donors : ndarray, shape (n_donors, n_periods)

    Notes
    -----
    The constrained least squares of Abadie, Diamond & Hainmueller (2010) on the
    pre-period outcomes, solved by :func:`simplex_least_squares`.

    >>> donors = np.array([[1.0, 2.0, 3.0], [3.0, 1.0, 0.0], [0.0, 0.0, 5.0]])
    >>> synthetic_control_weights(0.25 * donors[0] + 0.75 * donors[1], donors).round(6).tolist()
    [0.25, 0.75, 0.0]
    """
    return simplex_least_squares(np.asarray(donors, dtype=float).T, target)


def group_series(series: np.ndarray, users: np.ndarray, members: np.ndarray) -> np.ndarray:
    """Return the user-weighted mean daily series of the pools in ``members``."""
    return (series[members] * users[members, None]).sum(axis=0) / users[members].sum()


def _synthetic_gaps(series: np.ndarray, users: np.ndarray, treated: np.ndarray, n_pre: int
                    ) -> tuple[np.ndarray, float]:
    """Gaps (treated - synthetic) per day, and the pre-period RMSPE."""
    target = group_series(series, users, treated)
    donors = series[~treated]
    weights = synthetic_control_weights(target[:n_pre], donors[:, :n_pre])
    gaps = target - weights @ donors
    return gaps, float(np.sqrt(np.mean(gaps[:n_pre] ** 2)))


def placebo_degrees_of_freedom(n_controls: int, n_sets: int, every_set: bool) -> float:
    """Return the degrees of freedom of the placebo variance: ``1 / (1/(N_co - 1) + 1/B)``.

    Derivation (ours, for an estimator linear in the pools' series with equal
    weights, i.e. difference in differences, which synthetic DiD becomes with
    uniform weights): a placebo launch of ``k`` of the ``n = N_co`` other pools
    estimates ``ybar_S - ybar_rest = n / (n - k) (ybar_S - ybar_n)``; over all
    ``C(n, k)`` sets its variance is ``s^2 (1/k + 1/(n - k))``, with ``s^2`` the
    sample variance (``n - 1`` df) of the ``n`` pools' changes (the variance of a
    mean of ``k`` drawn without replacement, Cochran 1977, eq. 2.8). So the
    placebo variance carries ``n - 1`` df, and ``point / se`` is Student's t,
    not normal: with 25 other pools the normal quantile covers about 94%, as
    measured. When ``B`` sets are drawn at random instead of all listed, their
    sample variance adds relative variance ``2 / B`` (normal placebo estimates);
    Satterthwaite's rule (1946) adds the two ``2 / df`` terms.

    >>> round(placebo_degrees_of_freedom(25, 200, every_set=False), 6)  # 1 / (1/24 + 1/200)
    21.428571
    >>> placebo_degrees_of_freedom(7, 21, every_set=True)
    6.0
    """
    inverse = 1.0 / (n_controls - 1) + (0.0 if every_set else 1.0 / n_sets)
    return 1.0 / inverse


def placebo_variance(point_of, series: np.ndarray, users: np.ndarray, launched: np.ndarray
                     ) -> tuple[float, float]:
    """Return the placebo variance of a launch estimator and its degrees of freedom.

    Arkhangelsky et al. (2021), Algorithm 4: among the pools that did not launch,
    as many as launched are made placebo-launched (:func:`placebo_sets`), the
    estimator ``point_of(series, users, treated)`` is applied to the other pools'
    data alone, and the variance is ``mean_b (tau_b - mean tau)^2``. It assumes
    the launched group's noise is like that of a random group of the same size.
    The degrees of freedom are :func:`placebo_degrees_of_freedom` (the paper uses
    the normal quantile, right as the number of other pools grows).
    """
    controls = np.flatnonzero(~launched)
    size = int(launched.sum())
    points = []
    for members in placebo_sets(controls.size, size):
        fake = np.zeros(controls.size, dtype=bool)
        fake[members] = True
        points.append(point_of(series[controls], users[controls], fake))
    points = np.array(points)
    every_set = math.comb(controls.size, size) <= PLACEBO_SETS
    df = placebo_degrees_of_freedom(controls.size, points.size, every_set)
    return float(np.mean((points - points.mean()) ** 2)), df


def placebo_rank_p_value(statistic_of, series: np.ndarray, users: np.ndarray,
                         launched: np.ndarray) -> float:
    """Return the rank p-value of ``statistic_of`` among placebo launches of all pools.

    The same statistic is computed for sets of as many pools as launched, drawn
    from all pools (:func:`placebo_sets`), each against all the others:
    ``p = (1 + #{b: T_b >= T}) / (1 + B)`` (when every set is listed, the real one
    is left out of the ``B``). Under no effect and a launched set
    chosen at random, the real set is one more draw from the same distribution, so
    the test is exact (Fisher's randomization test; for synthetic control
    Abadie, Diamond & Hainmueller 2010, section 2.4, and Firpo & Possebom 2018).
    """
    real = statistic_of(series, users, launched)
    sets = placebo_sets(launched.size, int(launched.sum()))
    if math.comb(launched.size, int(launched.sum())) <= PLACEBO_SETS:  # every set: all but the real
        sets = sets[~(sets == np.flatnonzero(launched)).all(axis=1)]
    higher = 0
    for members in sets:
        fake = np.zeros(launched.size, dtype=bool)
        fake[members] = True
        higher += statistic_of(series, users, fake) >= real - 1e-12 * abs(real)
    return (1 + higher) / (1 + len(sets))


def synthetic_control(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                      confidence: float = 0.95) -> Estimate:
    """Estimate the effect on the launched pools by synthetic control.

    The launched pools' user-weighted daily series is matched over the
    pre-period by a convex combination of the other pools
    (:func:`synthetic_control_weights`); the estimate is the mean post-launch gap
    times the post-launch days (Abadie, Diamond & Hainmueller 2010).

    Inference: the standard error is the placebo standard error of Arkhangelsky
    et al. (2021), Algorithm 4 (:func:`placebo_variance`: placebo launches of as
    many pools as launched, among the others), with a Student t interval on
    :func:`placebo_degrees_of_freedom` (the normal quantile of the paper covered
    about 94% with 25 other pools).
    ``p_value`` is the rank of the post/pre RMSPE ratio among placebo launches of
    as many pools as launched (:func:`placebo_rank_p_value`; Abadie, Diamond &
    Hainmueller 2010; Firpo & Possebom 2018), exact under no effect when the
    launched pools are a random set.
    """
    method = "synthetic_control"
    confidence, series, users, launched, n_pre = _check_inputs(panel, schedule, confidence,
                                                               method)
    n_post = series.shape[1] - n_pre
    n_donors = int((~launched).sum())
    if not launched.any() or n_donors < launched.sum() + 2 or n_pre < 2:
        return degenerate_estimate(method, "fewer than two donor pools beyond the placebo "
                                   "launches, or two pre-period days",
                                   n_units=int(series.shape[0]))

    def point_of(s: np.ndarray, u: np.ndarray, treated: np.ndarray) -> float:
        return float(_synthetic_gaps(s, u, treated, n_pre)[0][n_pre:].mean()) * n_post

    def ratio_of(s: np.ndarray, u: np.ndarray, treated: np.ndarray) -> float:
        gaps, pre = _synthetic_gaps(s, u, treated, n_pre)
        post = float(np.sqrt(np.mean(gaps[n_pre:] ** 2)))
        return post / pre if pre > 0 else math.inf

    gaps, pre_rmspe = _synthetic_gaps(series, users, launched, n_pre)
    point = float(gaps[n_pre:].mean()) * n_post
    variance, df = placebo_variance(point_of, series, users, launched)
    estimate = build_estimate(point, variance, confidence=confidence, method=method,
                              n_units=int(series.shape[0]), df=df)
    p_value = placebo_rank_p_value(ratio_of, series, users, launched)
    fit = LaunchDiagnostic(pre_rmspe=pre_rmspe,
                           post_rmspe=float(np.sqrt(np.mean(gaps[n_pre:] ** 2))))
    estimate = with_launch_control_mean(estimate, series, users, launched, n_pre)
    return replace(estimate, p_value=float(p_value), diagnostic=fit)
