"""Effect on the treated of a self-selected launch: propensity score matching, IPW and AIPW.

Users chose their arm themselves, so arms differ before treatment. Each estimator
fits a propensity score (a logistic regression of the arm on the observed
covariates: pre-period orders and home pool) and targets the average effect on
the treated (ATT), fulfilled orders per user over the horizon. The array-level
functions (``*_att``) take an outcome vector, an arm vector and a covariate
matrix; the panel-level ones build those from an outcome panel and a schedule.

References: Rosenbaum & Rubin (1983) for the propensity score; Abadie & Imbens
(2006) for matching and its variance; Lunceford & Davidian (2004) and Stefanski &
Boos (2002) for the M-estimation (sandwich) variance of weighting estimators;
Wooldridge (2007) for the doubly robust weighted regression adjustment.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import replace

import numpy as np

from spillgauge.estimators._inference import (
    build_estimate,
    check_common_inputs,
    check_static,
    degenerate_estimate,
)
from spillgauge.estimators.estimate import Estimate, LaunchDiagnostic
from spillgauge.estimators.relative import with_control_mean
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["propensity_covariates", "fit_propensity", "matching_att", "ipw_att", "aipw_att",
           "propensity_score_matching", "inverse_probability_weighting",
           "augmented_inverse_probability_weighting", "standardized_mean_differences",
           "balance_and_overlap", "estimated_score_adjustment",
           "CALIPER_SD"]

CALIPER_SD = 0.2  # caliper in SDs of the logit of the propensity score (Austin 2011)


def propensity_covariates(history: np.ndarray, pool_of_user: np.ndarray) -> np.ndarray:
    """Return the covariate matrix: a constant, pre-period orders and home-pool indicators.

    Shape ``(n_users, 2 + n_pools_present - 1)``; the first pool present is the
    reference level. Pre-period orders are left out when they are all equal (no
    pre-period).

    >>> propensity_covariates(np.array([1.0, 0.0, 3.0]), np.array([0, 1, 1])).tolist()
    [[1.0, 1.0, 0.0], [1.0, 0.0, 1.0], [1.0, 3.0, 1.0]]
    """
    history = np.asarray(history, dtype=float)
    pools = np.unique(pool_of_user, return_inverse=True)[1]
    dummies = np.eye(int(pools.max()) + 1 if pools.size else 1)[pools][:, 1:]
    columns = [np.ones(history.size)]
    if history.size and np.ptp(history) > 0:
        columns.append(history)
    return np.column_stack([*columns, dummies])


def fit_propensity(treated: np.ndarray, covariates: np.ndarray) -> np.ndarray:
    """Fit the logistic propensity score by maximum likelihood; return ``(params, p)``.

    Uses ``statsmodels.api.Logit`` (Newton's method). Raises ``ValueError`` when
    the fit does not converge or separates the arms.
    """
    import statsmodels.api as sm
    from statsmodels.tools.sm_exceptions import (
        ConvergenceWarning,
        PerfectSeparationWarning,
    )

    with warnings.catch_warnings():
        warnings.simplefilter("error", ConvergenceWarning)
        warnings.simplefilter("error", PerfectSeparationWarning)
        warnings.simplefilter("ignore", RuntimeWarning)
        try:
            result = sm.Logit(treated.astype(float), covariates).fit(disp=0, method="newton",
                                                                     maxiter=100)
        except (ConvergenceWarning, PerfectSeparationWarning, np.linalg.LinAlgError) as exc:
            raise ValueError(f"the propensity score cannot be fitted ({exc})") from None
    params = np.asarray(result.params, dtype=float)
    probability = 1.0 / (1.0 + np.exp(-covariates @ params))
    if not np.all(np.isfinite(probability)) or probability.min() <= 0 or probability.max() >= 1:
        raise ValueError("the propensity score reaches 0 or 1 (no overlap)")
    return params, probability


def _sandwich(moments: np.ndarray, jacobian: np.ndarray) -> np.ndarray:
    """Return ``J^-1 B J^-T / n`` with ``B = G'G / n`` (Stefanski & Boos 2002, eq. 6)."""
    n = moments.shape[0]
    bread = np.linalg.inv(jacobian)
    meat = moments.T @ moments / n
    return bread @ meat @ bread.T / n


def ipw_att(outcome: np.ndarray, treated: np.ndarray, covariates: np.ndarray, *,
            full: bool = False) -> tuple:
    """Return the normalised IPW estimate of the ATT and its sandwich standard error.

    ``tau = mean_T(y) - sum_C w y / sum_C w`` with odds weights ``w = p / (1 - p)``
    on controls (Hirano, Imbens & Ridder 2003; normalised as in Lunceford &
    Davidian 2004). The variance stacks the estimating equations of
    ``(tau, mu0)`` with the logit score, so the fitted propensity score's
    uncertainty is carried (Lunceford & Davidian 2004, section 3.2; Stefanski &
    Boos 2002). Equals ``statsmodels``' ``TreatmentEffect.ipw(effect_group=1)``.
    With ``full``, also returns the opted-in users' counterfactual mean ``mu0``
    (the weighted control mean), its variance and its covariance with ``tau``
    (the same sandwich's entries).
    """
    y, t, x = np.asarray(outcome, float), np.asarray(treated, bool), np.asarray(covariates, float)
    _, p = fit_propensity(t, x)
    tf = t.astype(float)
    odds = p / (1.0 - p)
    w = np.where(t, 1.0, odds)
    mu1 = y[t].mean()
    mu0 = float(np.sum(w * (1 - tf) * y) / np.sum(w * (1 - tf)))
    a, b = mu1 - mu0, mu0
    residual = y - a * tf - b
    moments = np.column_stack([w * tf * residual, w * residual, (tf - p)[:, None] * x])
    n, k = x.shape
    jacobian = np.zeros((k + 2, k + 2))
    jacobian[0, 0] = jacobian[0, 1] = jacobian[1, 0] = -tf.mean()
    jacobian[1, 1] = -w.mean()
    jacobian[1, 2:] = ((1 - tf) * odds * (y - b)) @ x / n
    jacobian[2:, 2:] = -(x * (p * (1 - p))[:, None]).T @ x / n
    cov = _sandwich(moments, jacobian)
    if full:  # the control mean mu0 and its (co)variance with tau, from the same sandwich
        return float(a), float(math.sqrt(max(cov[0, 0], 0.0))), mu0, cov[1, 1], cov[0, 1]
    return float(a), float(math.sqrt(max(cov[0, 0], 0.0)))


def aipw_att(outcome: np.ndarray, treated: np.ndarray, covariates: np.ndarray, *,
             full: bool = False) -> tuple:
    """Return the doubly robust ATT (odds-weighted regression adjustment) and its SE.

    The control outcome model ``m0(x) = x gamma`` is fitted on controls by least
    squares weighted by the odds ``p / (1 - p)``; ``tau = mean_T(y - m0(x))``.
    Consistent when either the propensity or the outcome model is right
    (Wooldridge 2007; Kang & Schafer 2007 for the ATT form). The sandwich stacks
    ``tau``, ``gamma`` and the logit score (Lunceford & Davidian 2004; Stefanski &
    Boos 2002). Equals ``statsmodels``' ``TreatmentEffect.ipw_ra(effect_group=1)``.
    With ``full``, also returns the opted-in users' counterfactual mean
    ``mean_T m0(x) = mu1 - tau`` (``mu1`` their observed mean), its variance and
    its covariance with ``tau``: the sandwich gains the moment ``t (y - mu1)``
    (Jacobian ``-mean t`` on ``mu1``, zero elsewhere), so
    ``Var(mu1 - tau) = V_11 + V_tt - 2 V_1t`` and ``Cov(tau, mu1 - tau) = V_1t - V_tt``.
    """
    y, t, x = np.asarray(outcome, float), np.asarray(treated, bool), np.asarray(covariates, float)
    _, p = fit_propensity(t, x)
    tf = t.astype(float)
    odds = p / (1.0 - p)
    wc = (1 - tf) * odds
    gamma = np.linalg.lstsq(x * np.sqrt(wc)[:, None], y * np.sqrt(wc), rcond=None)[0]
    fitted = x @ gamma
    tau = float(np.mean((y - fitted)[t]))
    n, k = x.shape
    residual = y - fitted
    moments = np.column_stack([tf * (residual - tau), (wc * residual)[:, None] * x,
                               (tf - p)[:, None] * x])
    jacobian = np.zeros((2 * k + 1, 2 * k + 1))
    jacobian[0, 0] = -tf.mean()
    jacobian[0, 1:k + 1] = -(tf @ x) / n
    jacobian[1:k + 1, 1:k + 1] = -(x * wc[:, None]).T @ x / n
    jacobian[1:k + 1, k + 1:] = (x * (wc * residual)[:, None]).T @ x / n
    jacobian[k + 1:, k + 1:] = -(x * (p * (1 - p))[:, None]).T @ x / n
    cov = _sandwich(moments, jacobian)
    if full:  # append mu1 = mean_T(y): moment t (y - mu1), d/d mu1 = -mean(t)
        mu1 = float(y[t].mean())
        jacobian = np.pad(jacobian, ((0, 1), (0, 1)))
        jacobian[-1, -1] = -tf.mean()
        joint = _sandwich(np.column_stack([moments, tf * (y - mu1)]), jacobian)
        v_tau, v_mu1, c_mu1_tau = cov[0, 0], joint[-1, -1], joint[0, -1]
        return (tau, float(math.sqrt(max(v_tau, 0.0))), mu1 - tau,
                v_mu1 + v_tau - 2 * c_mu1_tau, c_mu1_tau - v_tau)
    return tau, float(math.sqrt(max(cov[0, 0], 0.0)))


def _match_on_score(score: np.ndarray, t: np.ndarray, caliper_sd: float):
    """Return (matched treated users, their controls, controls by score, sorted scores)."""
    caliper = caliper_sd * float(np.sqrt((score[t].var(ddof=1) + score[~t].var(ddof=1)) / 2))
    controls = np.flatnonzero(~t)
    order = controls[np.argsort(score[controls], kind="stable")]
    sorted_score = score[order]
    treated_users = np.flatnonzero(t)
    right = np.clip(np.searchsorted(sorted_score, score[treated_users]), 0, order.size - 1)
    left = np.clip(right - 1, 0, order.size - 1)
    values = score[treated_users]
    position = np.where(np.abs(values - sorted_score[left])
                        <= np.abs(sorted_score[right] - values), left, right)
    inside = np.abs(values - sorted_score[position]) <= caliper
    return treated_users[inside], order[position[inside]], order, sorted_score


def balance_and_overlap(history: np.ndarray, treated: np.ndarray, covariates: np.ndarray, *,
                        adjustment: str) -> LaunchDiagnostic:
    """Return the balance of pre-period orders and the overlap of an opt-in's arms.

    ``smd_before`` is :func:`standardized_mean_differences` of ``history``;
    ``smd_after`` the same after the adjustment (``"matching"``: matched opted-in
    users against their controls, counted as often as used; ``"weighting"``:
    controls weighted by the odds ``p / (1 - p)``), over the same unadjusted pooled
    SD, so only the means move (Austin 2009; ``|SMD| < 0.1`` is the usual rule,
    common practice). ``off_support_share``: opted-in users whose fitted score is
    outside the others' range; ``unmatched_share``: opted-in users matching leaves
    out (NaN unless ``"matching"``).
    """
    history = np.asarray(history, float)
    t = np.asarray(treated, bool)
    _, p = fit_propensity(t, np.asarray(covariates, float))
    off_support = float(np.mean((p[t] > p[~t].max()) | (p[t] < p[~t].min())))
    before = standardized_mean_differences(history, t) if np.ptp(history) > 0 else math.nan
    scale = math.sqrt((history[t].var(ddof=1) + history[~t].var(ddof=1)) / 2)
    unmatched = after = math.nan
    if adjustment == "matching":
        matched, match, _, _ = _match_on_score(np.log(p / (1 - p)), t, CALIPER_SD)
        unmatched = float(1.0 - matched.size / t.sum())
        if scale > 0 and matched.size:
            after = float((history[matched].mean() - history[match].mean()) / scale)
    elif scale > 0:
        after = standardized_mean_differences(history, t, weights=np.where(t, 1.0, p / (1 - p)))
    return LaunchDiagnostic(smd_before=before, smd_after=after, off_support_share=off_support,
                            unmatched_share=unmatched)


def _score_neighbours(score: np.ndarray, members: np.ndarray, count: int) -> np.ndarray:
    """For every user, the ``count`` users of ``members`` nearest in score, shape (n, count)."""
    order = members[np.argsort(score[members], kind="stable")]
    ranked = score[order]
    width = min(2 * count, order.size)  # a window of distinct users around each score
    start = np.clip(np.searchsorted(ranked, score) - count, 0, order.size - width)
    candidates = start[:, None] + np.arange(width)[None, :]
    distance = np.abs(ranked[candidates] - score[:, None])
    pick = np.argsort(distance, axis=1, kind="stable")[:, :count]
    return order[np.take_along_axis(candidates, pick, axis=1)]


def estimated_score_adjustment(outcome: np.ndarray, treated: np.ndarray,
                               covariates: np.ndarray, probability: np.ndarray, tau: float, *,
                               neighbours: int = 4) -> float:
    """Return the change in the matching ATT's variance for a fitted logistic score.

    Abadie & Imbens (2016), Theorem 2, for the ATT:
    ``V_adj = V - (c' I^-1 c - d' I^-1 d) / N`` with ``I = E[f X X']`` the logit's
    information (``f = p (1 - p)``),
    ``c = E[f (cov(X, mu_1 | p) + p / (1 - p) cov(X, mu_0 | p))] / E[p]`` and
    ``d = E[X f (mu_1(p) - mu_0(p) - tau)] / E[p]`` (the ATT's weights move with
    the fitted score). The conditional covariances and means given the score are
    estimated from each user's ``neighbours`` nearest users of each arm in score
    (their section 4). Its sign depends on the data.
    """
    y, t, x = np.asarray(outcome, float), np.asarray(treated, bool), np.asarray(covariates, float)
    p = np.asarray(probability, float)
    f = p * (1 - p)
    score = np.log(p / (1 - p))
    moments = {}
    for arm, members in ((1, np.flatnonzero(t)), (0, np.flatnonzero(~t))):
        nearest = _score_neighbours(score, members, neighbours)
        xs, ys = x[nearest], y[nearest]                              # (n, L, k), (n, L)
        centred_x = xs - xs.mean(axis=1, keepdims=True)
        centred_y = ys - ys.mean(axis=1, keepdims=True)
        moments[arm] = ((centred_x * centred_y[:, :, None]).sum(axis=1) / (neighbours - 1),
                        ys.mean(axis=1))
    n1 = float(t.sum())
    c = (f[:, None] * (moments[1][0] + (p / (1 - p))[:, None] * moments[0][0])).sum(axis=0) / n1
    d = (x * (f * (moments[1][1] - moments[0][1] - tau))[:, None]).sum(axis=0) / n1
    inverse = np.linalg.pinv((x * f[:, None]).T @ x / y.size)
    return float((d @ inverse @ d - c @ inverse @ c) / y.size)


def matching_att(outcome: np.ndarray, treated: np.ndarray, covariates: np.ndarray, *,
                 caliper_sd: float = CALIPER_SD, estimated_score: bool = True
                 ) -> tuple[float, float, int]:
    """Return the ATT by nearest-neighbour matching on the logit propensity score.

    One control per treated user, with replacement, within a caliper of
    ``caliper_sd`` pooled SDs of the logit score (Rosenbaum & Rubin 1985; Austin
    2011); treated users without a control inside the caliper are left out.
    The variance is Abadie & Imbens (2006), eq. for the ATT with ``M = 1``:
    ``V = (1/N1^2) [sum_T (Y_i - Y_m(i) - tau)^2 + sum_C K_j (K_j - 1) s_j^2]``,
    ``K_j`` the times control ``j`` is used and ``s_j^2 = (Y_j - Y_l(j))^2 / 2``
    with ``l(j)`` the control nearest to ``j`` (their section 4.1, ``J = 1``).
    With ``estimated_score`` (the default) the variance adds Abadie & Imbens
    (2016)'s term for the fitted score (:func:`estimated_score_adjustment`);
    without it the score is treated as known (conservative here: 98% coverage).

    Returns ``(tau, se, n_matched_treated, mean outcome of the matched treated)``.
    """
    y, t, x = np.asarray(outcome, float), np.asarray(treated, bool), np.asarray(covariates, float)
    _, p = fit_propensity(t, x)
    score = np.log(p / (1 - p))
    treated_users, match, order, sorted_score = _match_on_score(score, t, caliper_sd)
    n1 = treated_users.size
    if n1 < 2:
        raise ValueError("fewer than two treated users have a control inside the caliper")
    gaps = y[treated_users] - y[match]
    tau = float(gaps.mean())
    used = np.bincount(match, minlength=y.size)
    # s_j^2: each control's nearest other control (its closer neighbour in score order).
    gap = np.diff(sorted_score)
    gap_up = np.append(gap, np.inf)
    gap_down = np.insert(gap, 0, np.inf)
    k = np.arange(order.size)
    neighbour = order[np.clip(np.where(gap_up < gap_down, k + 1, k - 1), 0, order.size - 1)]
    s2 = np.zeros(y.size)
    s2[order] = (y[order] - y[neighbour]) ** 2 / 2.0
    variance = (np.sum((gaps - tau) ** 2) + np.sum(used * (used - 1) * s2)) / n1 ** 2
    if estimated_score:
        variance = max(variance + estimated_score_adjustment(y, t, x, p, tau), 0.0)
    return tau, float(math.sqrt(variance)), int(n1), float(y[treated_users].mean())


def standardized_mean_differences(values: np.ndarray, treated: np.ndarray,
                                  weights: np.ndarray | None = None) -> float:
    """Return the standardized mean difference of a covariate between arms (Austin 2011).

    ``(mean_T - mean_C) / sqrt((s_T^2 + s_C^2) / 2)`` with unweighted SDs; the
    control mean is weighted when ``weights`` are given (after matching or
    weighting).

    >>> round(standardized_mean_differences(np.array([1.0, 2.0, 3.0, 4.0]),
    ...                                     np.array([False, False, True, True])), 4)
    2.8284
    """
    t = np.asarray(treated, bool)
    values = np.asarray(values, float)
    control_mean = np.average(values[~t], weights=None if weights is None else weights[~t])
    scale = math.sqrt((values[t].var(ddof=1) + values[~t].var(ddof=1)) / 2)
    return float((values[t].mean() - control_mean) / scale) if scale > 0 else 0.0


def _panel_arrays(panel: OutcomePanel, schedule: AssignmentSchedule, confidence: float,
                  method: str):
    confidence = check_common_inputs(panel, schedule, confidence, method)
    check_static(schedule, method)
    treated = schedule.user_is_treated()
    covariates = propensity_covariates(panel.history, panel.pool_of_user)
    return confidence, panel.user_outcome().astype(float), treated, covariates


def _run(method, panel, schedule, confidence, function, adjustment) -> Estimate:
    """Fit, then fill the control mean: the opted-in users' counterfactual mean.

    Weighting: the sandwich's own control mean, variance and covariance (see
    :func:`ipw_att`, :func:`aipw_att`). Matching: the matched controls' mean
    ``mean_T(y) - tau``; the matched opted-in users' own mean is observed, so the
    control mean's error is minus the effect's: variance ``se^2``, covariance
    ``-se^2`` (the default of :func:`~spillgauge.estimators.relative.with_control_mean`).
    """
    confidence, y, t, x = _panel_arrays(panel, schedule, confidence, method)
    n = int(y.size)
    if t.sum() < 2 or (~t).sum() < 2:
        return degenerate_estimate(method, "fewer than two users in an arm", n_units=n)
    try:
        if adjustment == "matching":
            point, se, n_units, treated_mean = function(y, t, x)
            control = (treated_mean - point, se * se, None)
        else:
            point, se, *control = function(y, t, x, full=True)
            n_units = n
        diagnostic = balance_and_overlap(panel.history, t, x, adjustment=adjustment)
    except ValueError as exc:
        return degenerate_estimate(method, str(exc), n_units=n)
    estimate = build_estimate(point, se * se, confidence=confidence, method=method,
                              n_units=n_units)
    return with_control_mean(replace(estimate, diagnostic=diagnostic), *control)


def propensity_score_matching(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                              confidence: float = 0.95) -> Estimate:
    """Estimate the ATT by 1:1 propensity score matching with replacement and a caliper.

    See :func:`matching_att`; ``n_units`` is the number of matched treated users.
    Covariates: :func:`propensity_covariates` of the panel's pre-period orders and
    home pools; outcome: fulfilled orders per user over the horizon.
    """
    return _run("propensity_score_matching", panel, schedule, confidence, matching_att,
                "matching")


def inverse_probability_weighting(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                                  confidence: float = 0.95) -> Estimate:
    """Estimate the ATT by normalised inverse probability (odds) weighting; see :func:`ipw_att`."""
    return _run("inverse_probability_weighting", panel, schedule, confidence, ipw_att,
                "weighting")


def augmented_inverse_probability_weighting(panel: OutcomePanel, schedule: AssignmentSchedule,
                                            *, confidence: float = 0.95) -> Estimate:
    """Estimate the ATT doubly robustly (odds-weighted regression adjustment).

    See :func:`aipw_att`.
    """
    return _run("augmented_inverse_probability_weighting", panel, schedule, confidence,
                aipw_att, "weighting")
