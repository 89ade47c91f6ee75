"""Synthetic difference in differences for a regional launch (Arkhangelsky et al. 2021).

Unit weights make the other pools' weighted series parallel to the launched
pools' before the launch (with an intercept and a ridge penalty); time weights
make the weighted pre-launch days resemble the post-launch days for the other
pools (with an intercept); the estimate is the two-way fixed-effects regression
weighted by both. Everything is on the pool-day series of fulfilled orders per
user, as the other launch estimators in :mod:`spillgauge.estimators.launch`.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from spillgauge.estimators._inference import build_estimate, degenerate_estimate
from spillgauge.estimators.estimate import Estimate, LaunchDiagnostic
from spillgauge.estimators.launch import (
    _check_inputs,
    group_series,
    placebo_variance,
    simplex_least_squares,
    with_launch_control_mean,
)
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["synthetic_did_regularization", "synthetic_did_unit_weights",
           "synthetic_did_time_weights", "synthetic_did_fit", "synthetic_did_jackknife_variance",
           "synthetic_difference_in_differences", "SDID_VARIANCES"]

SDID_VARIANCES = ("placebo", "jackknife")


def synthetic_did_regularization(donors_pre: np.ndarray, n_treated: int, n_post: int) -> float:
    """Return the unit weights' ridge scale ``zeta = (N_tr T_post)^(1/4) sigma``.

    ``sigma^2`` is the variance of the other units' first differences over the
    pre-period, ``1 / (N_co (T_pre - 1)) sum (Delta_it - mean Delta)^2``
    (Arkhangelsky et al. 2021, eq. 2.2 / Algorithm 1, step 1).

    >>> synthetic_did_regularization(np.array([[0.0, 1.0, 0.0], [2.0, 3.0, 2.0]]), 1, 16)
    2.0
    """
    differences = np.diff(np.asarray(donors_pre, dtype=float), axis=1)
    sigma = math.sqrt(np.mean((differences - differences.mean()) ** 2))
    return (n_treated * n_post) ** 0.25 * sigma


def synthetic_did_unit_weights(target_pre: np.ndarray, donors_pre: np.ndarray, zeta: float
                               ) -> tuple[float, np.ndarray]:
    """Return ``(omega_0, omega)`` minimising the unit-weight loss of synthetic DiD.

    ``sum_t (omega_0 + sum_i omega_i Y_it - y_t)^2 + zeta^2 T_pre ||omega||^2`` over
    pre-period days ``t``, ``omega`` in the simplex (Arkhangelsky et al. 2021,
    eq. 2.2). The free intercept ``omega_0`` is profiled out by centring each
    series over the pre-period; then :func:`simplex_least_squares` with ridge
    ``zeta^2 T_pre``.

    Parameters
    ----------
    target_pre : ndarray, shape (T_pre,)
        The launched pools' (user-weighted) mean series before the launch.
    donors_pre : ndarray, shape (N_co, T_pre)
    """
    target_pre = np.asarray(target_pre, dtype=float)
    donors_pre = np.asarray(donors_pre, dtype=float)
    n_pre = target_pre.size
    centred = (donors_pre - donors_pre.mean(axis=1, keepdims=True)).T
    weights = simplex_least_squares(centred, target_pre - target_pre.mean(),
                                    ridge=zeta ** 2 * n_pre)
    return float(target_pre.mean() - weights @ donors_pre.mean(axis=1)), weights


def synthetic_did_time_weights(donors_pre: np.ndarray, donors_post: np.ndarray
                               ) -> tuple[float, np.ndarray]:
    """Return ``(lambda_0, lambda)`` minimising the time-weight loss of synthetic DiD.

    ``sum_i (lambda_0 + sum_t lambda_t Y_it - mean_post Y_i)^2`` over the other
    units ``i``, ``lambda`` in the simplex over pre-period days (Arkhangelsky et
    al. 2021, eq. 2.3, without regularisation). The intercept is profiled out by
    centring over units.

    Parameters
    ----------
    donors_pre : ndarray, shape (N_co, T_pre)
    donors_post : ndarray, shape (N_co, T_post)
    """
    donors_pre = np.asarray(donors_pre, dtype=float)
    post_mean = np.asarray(donors_post, dtype=float).mean(axis=1)
    centred = donors_pre - donors_pre.mean(axis=0, keepdims=True)
    weights = simplex_least_squares(centred, post_mean - post_mean.mean())
    return float(post_mean.mean() - donors_pre.mean(axis=0) @ weights), weights


def synthetic_did_fit(series: np.ndarray, users: np.ndarray, treated: np.ndarray, n_pre: int
                      ) -> tuple[float, np.ndarray, np.ndarray]:
    """Return ``(tau, omega, lambda)``: the effect per post-launch day and both weights.

    ``tau`` is the weighted double difference

    ``(ybar_tr,post - sum_t lambda_t y_tr,t) - sum_i omega_i (ybar_i,post - sum_t lambda_t Y_it)``,

    which equals the coefficient on the launch of the two-way fixed-effects
    regression with weights ``omega_i lambda_t`` (launched pools weighted by
    users, post-launch days equally; Arkhangelsky et al. 2021, eq. 1.1 and
    Algorithm 1). The launched pools enter through their user-weighted mean, so
    ``tau`` targets the effect per user of the launched pools (the paper weights
    treated units equally).
    """
    target = group_series(series, users, treated)
    donors = series[~treated]
    zeta = synthetic_did_regularization(donors[:, :n_pre], int(treated.sum()),
                                        series.shape[1] - n_pre)
    _, omega = synthetic_did_unit_weights(target[:n_pre], donors[:, :n_pre], zeta)
    _, lam = synthetic_did_time_weights(donors[:, :n_pre], donors[:, n_pre:])
    treated_change = target[n_pre:].mean() - target[:n_pre] @ lam
    donor_change = donors[:, n_pre:].mean(axis=1) - donors[:, :n_pre] @ lam
    return float(treated_change - omega @ donor_change), omega, lam


def synthetic_did_jackknife_variance(series: np.ndarray, users: np.ndarray,
                                     treated: np.ndarray, n_pre: int, omega: np.ndarray,
                                     lam: np.ndarray) -> float:
    """Return the fixed-weight jackknife variance of ``tau`` (per post-launch day).

    Arkhangelsky et al. (2021), Algorithm 3 [the algorithm's text from memory;
    its steps agree with the description of the authors' reference
    implementation]: for each of the ``N`` pools ``i``, ``tau^(-i)`` is the
    weighted two-way fixed-effects estimate (their eq. 1.1) on the other pools with
    the weights held fixed: the time weights ``lambda`` unchanged, the unit
    weights ``omega`` of the other pools renormalised to sum to 1, the launched
    pools' user shares renormalised over those left; then

    ``V = (N - 1) / N sum_i (tau^(-i) - tau)^2``

    (centred on the full-sample ``tau`` as in the paper's algorithm; the reference
    implementation centres on the mean of the ``tau^(-i)``, which is smaller by
    ``(N - 1) (mean tau^(-i) - tau)^2``). With the weights fixed, ``tau`` is the
    double difference of :func:`synthetic_did_fit`, so each ``tau^(-i)`` is a
    reweighting of every pool's own difference ``ybar_i,post - lambda' y_i,pre``.
    NaN when fewer than two pools launched (no ``tau`` without them) or when
    leaving out a donor leaves no unit weight (one donor holds all of it): the
    jackknife is then not defined.
    """
    difference = series[:, n_pre:].mean(axis=1) - series[:, :n_pre] @ lam
    share = np.where(treated, users, 0.0)
    weight = np.zeros(series.shape[0])
    weight[~treated] = omega
    if int(treated.sum()) < 2 or np.count_nonzero(omega) < 2:
        return math.nan
    tau = share @ difference / share.sum() - weight @ difference
    leave_one_out = np.empty(series.shape[0])
    for i in range(series.shape[0]):
        kept_share, kept_weight = share.copy(), weight.copy()
        kept_share[i] = kept_weight[i] = 0.0
        leave_one_out[i] = (kept_share @ difference / kept_share.sum()
                            - kept_weight @ difference / kept_weight.sum())
    n = series.shape[0]
    return float((n - 1) / n * np.sum((leave_one_out - tau) ** 2))


def synthetic_difference_in_differences(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                                        confidence: float = 0.95,
                                        variance: str = "placebo") -> Estimate:
    """Estimate the effect on the launched pools by synthetic difference in differences.

    The point is :func:`synthetic_did_fit`'s ``tau`` times the post-launch days.

    ``variance="placebo"`` (the default): the placebo variance of Arkhangelsky et
    al. (2021), Algorithm 4 (:func:`~spillgauge.estimators.launch.placebo_variance`:
    placebo launches of as many pools as launched among the others, weights
    refitted each time), with a Student t interval on
    :func:`~spillgauge.estimators.launch.placebo_degrees_of_freedom`. It assumes
    the launched pools' noise is like that of the others (homoskedastic across
    pools) and needs two more other pools than launched.

    ``variance="jackknife"``: the fixed-weight jackknife of Algorithm 3
    (:func:`synthetic_did_jackknife_variance`), defined with two or more
    launched pools; it does not assume the launched pools are like the others.
    The launched pools' share of it is a jackknife of their weighted mean, a
    variance estimate on ``N_tr - 1`` degrees of freedom (ours: the jackknife of a
    mean is ``s^2 / n``, Efron & Stein 1981), so the interval uses Student's t
    with ``N_tr - 1`` df (the paper's normal quantile assumes many launched pools).

    ``diagnostic`` holds the RMSPE of the launched pools' series against the
    unit-weighted others plus the weights' intercept, before and after the launch.
    """
    method = "synthetic_difference_in_differences"
    if variance not in SDID_VARIANCES:
        raise ValueError(f"{method}: variance must be one of {SDID_VARIANCES}; got {variance!r}")
    confidence, series, users, launched, n_pre = _check_inputs(panel, schedule, confidence,
                                                               method)
    n_post = series.shape[1] - n_pre
    n_launched, n_donors = int(launched.sum()), int((~launched).sum())
    if variance == "placebo" and (not n_launched or n_donors < n_launched + 2 or n_pre < 2):
        return degenerate_estimate(method, "fewer than two donor pools beyond the placebo "
                                   "launches, or two pre-period days",
                                   n_units=int(series.shape[0]))
    if variance == "jackknife" and (n_launched < 2 or n_donors < 2 or n_pre < 2):
        return degenerate_estimate(method, "fewer than two launched or two other pools (the "
                                   "jackknife), or two pre-period days",
                                   n_units=int(series.shape[0]))

    def point_of(s: np.ndarray, u: np.ndarray, treated: np.ndarray) -> float:
        return synthetic_did_fit(s, u, treated, n_pre)[0] * n_post

    tau, omega, lam = synthetic_did_fit(series, users, launched, n_pre)
    if variance == "placebo":
        var, df = placebo_variance(point_of, series, users, launched)
    else:
        var = synthetic_did_jackknife_variance(series, users, launched, n_pre, omega,
                                               lam) * n_post ** 2
        df = float(n_launched - 1)
        if not math.isfinite(var):
            return degenerate_estimate(method, "one donor pool holds all the unit weight (the "
                                       "jackknife is not defined)",
                                       n_units=int(series.shape[0]), point=tau * n_post)
    estimate = build_estimate(tau * n_post, var, confidence=confidence, method=method,
                              n_units=int(series.shape[0]), df=df)
    # the fit: launched pools against omega_0 + omega' donors (the unit weights' intercept)
    target, donors = group_series(series, users, launched), series[~launched]
    gaps = target - omega @ donors
    gaps = gaps - gaps[:n_pre].mean()
    fit = LaunchDiagnostic(pre_rmspe=float(np.sqrt(np.mean(gaps[:n_pre] ** 2))),
                           post_rmspe=float(np.sqrt(np.mean(gaps[n_pre:] ** 2))))
    estimate = with_launch_control_mean(estimate, series, users, launched, n_pre)
    return replace(estimate, diagnostic=fit)
