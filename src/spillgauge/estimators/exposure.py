"""Exposure-mapping estimators for graph cluster randomization.

A user is in *full-treatment exposure* when every cluster touching its closed
graph neighbourhood is treated, and in *full-control exposure* when every one is
in control (Ugander, Karrer, Backstrom & Kleinberg 2013). ``schedule.exposure_units``
is a sparse ``(n_users, n_units)`` matrix whose row ``i`` marks those clusters,
``S_i``; ``k_i = |S_i|`` is its number of non-zero entries. Outcomes are
``panel.user_outcome()``. Horvitz-Thompson and Hajek estimators weight each
exposed user by its inverse exposure probability (Aronow & Samii 2017).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy import sparse

from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.estimators._inference import (
    build_estimate,
    check_common_inputs,
    check_static,
    degenerate_estimate,
)
from spillgauge.estimators.estimate import Estimate
from spillgauge.estimators.relative import with_control_mean
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

__all__ = ["exposure_probabilities", "horvitz_thompson_exposure", "hajek_exposure"]


@dataclass(frozen=True, slots=True)
class _ExposureDesign:
    """The exposure structure of one schedule.

    ``all_treated[s]`` (``all_control[s]``) is the probability that a given set
    of ``s`` clusters is entirely treated (in control), for ``s = 0 .. G``.
    """

    incidence: sparse.csr_array
    n_touched: np.ndarray
    is_treated: np.ndarray
    all_treated: np.ndarray
    all_control: np.ndarray

    def probabilities(self) -> tuple[np.ndarray, np.ndarray]:
        return self.all_treated[self.n_touched], self.all_control[self.n_touched]

    def exposures(self) -> tuple[np.ndarray, np.ndarray]:
        n_treated = self.incidence @ self.is_treated.astype(np.int64)
        return n_treated == self.n_touched, n_treated == 0


def _set_probabilities(schedule: AssignmentSchedule, is_treated: np.ndarray,
                       method: str) -> tuple[np.ndarray, np.ndarray]:
    n_units = schedule.n_units
    sizes = np.arange(n_units + 1)
    if schedule.randomization == "bernoulli":
        p = float(schedule.treated_probability)
        if not 0.0 < p < 1.0:
            raise ValueError(f"{method}: a Bernoulli schedule needs treated_probability in "
                             f"(0, 1); got {schedule.treated_probability!r}")
        return p ** sizes, (1.0 - p) ** sizes
    if schedule.randomization == "complete":
        # P(a given set of s clusters all treated) = C(G-s, m-s) / C(G, m)
        #   = prod_{j<s} (m - j) / (G - j); the control analogue uses G - m.
        n_treated = int(is_treated.sum())
        drawn = np.arange(n_units)
        treated = np.cumprod(np.maximum(n_treated - drawn, 0) / (n_units - drawn))
        control = np.cumprod(np.maximum(n_units - n_treated - drawn, 0) / (n_units - drawn))
        return np.concatenate(([1.0], treated)), np.concatenate(([1.0], control))
    raise ValueError(f"{method} needs a randomized schedule ('complete' or 'bernoulli'); "
                     f"got randomization={schedule.randomization!r}")


def _exposure_design(schedule: AssignmentSchedule, method: str) -> _ExposureDesign:
    check_static(schedule, method)
    units = schedule.exposure_units
    if units is None:
        raise ValueError(f"{method} needs schedule.exposure_units, the (n_users, n_units) "
                         "matrix of clusters touching each user's closed neighbourhood")
    if units.shape != (schedule.n_users, schedule.n_units):
        raise ValueError(f"{method}: exposure_units must have shape (n_users, n_units) = "
                         f"{(schedule.n_users, schedule.n_units)}; got {units.shape}")
    marks = sparse.csr_array(units, dtype=float, copy=True)
    marks.sum_duplicates()
    marks.eliminate_zeros()
    incidence = sparse.csr_array((np.ones(marks.indices.size, dtype=np.int64), marks.indices,
                                  marks.indptr), shape=marks.shape)
    n_touched = np.diff(incidence.indptr)
    if np.any(n_touched == 0):
        raise ValueError(f"{method}: every row of exposure_units needs a non-zero entry (a "
                         f"closed neighbourhood holds the user); user "
                         f"{int(np.argmin(n_touched))} has none")
    is_treated = schedule.is_treated[:, 0].copy()
    all_treated, all_control = _set_probabilities(schedule, is_treated, method)
    return _ExposureDesign(incidence, n_touched, is_treated, all_treated, all_control)


def exposure_probabilities(schedule: AssignmentSchedule) -> tuple[np.ndarray, np.ndarray]:
    """Return each user's probabilities of full-treatment and full-control exposure.

    Parameters
    ----------
    schedule : AssignmentSchedule
        A static ``"bernoulli"`` or ``"complete"`` cluster schedule with
        ``exposure_units`` set.

    Returns
    -------
    pi1, pi0 : ndarray of float, shape (n_users,)
        ``P(all k_i clusters treated)`` and ``P(all k_i clusters in control)``.

    Raises
    ------
    ValueError
        If the schedule is not static, lacks ``exposure_units`` (or it has the
        wrong shape or an empty row), or is not randomized.

    Notes
    -----
    Bernoulli(p) clusters: ``pi1 = p^k``, ``pi0 = (1 - p)^k`` (Ugander et al. 2013).
    Complete randomization of ``m`` of ``G`` clusters (``m`` read from the
    schedule): ``pi1 = C(G - k, m - k) / C(G, m)`` and ``pi0 = C(G - k, m) / C(G, m)``
    (hypergeometric), computed as products to avoid overflow.

    Examples
    --------
    Path 0-1-2-3-4-5 with clusters {0, 1}, {2, 3}, {4, 5}:

    >>> touched = [[0], [0, 1], [0, 1], [1, 2], [1, 2], [2]]
    >>> rows = np.repeat(np.arange(6), [len(t) for t in touched])
    >>> units = sparse.csr_array((np.ones(rows.size), (rows, np.concatenate(touched))),
    ...                          shape=(6, 3))
    >>> schedule = AssignmentSchedule(
    ...     unit_of_user=np.array([0, 0, 1, 1, 2, 2]), is_treated=np.array([[1], [1], [0]], bool),
    ...     period_start_ticks=[0], n_ticks=1, treated_probability=0.5, unit_kind="cluster",
    ...     randomization="bernoulli", exposure_units=units)
    >>> pi1, pi0 = exposure_probabilities(schedule)
    >>> pi1.tolist()
    [0.5, 0.25, 0.25, 0.25, 0.25, 0.5]
    """
    return _exposure_design(schedule, "exposure_probabilities").probabilities()


def _pair_sum(incidence: sparse.csr_array, rows: np.ndarray, values: np.ndarray,
              probabilities: np.ndarray, all_in_arm: np.ndarray) -> float:
    """Return sum over ordered pairs i, j of ``rows`` with S_i, S_j overlapping of
    ``(1 - pi_i pi_j / pi_ij) (v_i / pi_i) (v_j / pi_j)`` (the pair i = i included)."""
    if rows.size == 0:
        return 0.0
    sub = incidence[rows]
    shared = (sub @ sub.T).tocoo()
    size = np.diff(sub.indptr)
    i, j = shared.row, shared.col
    joint = all_in_arm[size[i] + size[j] - shared.data]
    pi = probabilities[rows]
    weighted = values[rows] / pi
    return float(np.sum((1.0 - pi[i] * pi[j] / joint) * weighted[i] * weighted[j]))


def _aronow_samii_variance(design: _ExposureDesign, kept: np.ndarray, exposed: tuple,
                           values: tuple, probabilities: tuple) -> tuple[float, float]:
    """Conservative variance of ``(1/N) sum_i [1{E1} v1_i / pi1_i - 1{E0} v0_i / pi0_i]``.

    Returns the variance and its full-control part: the same bound for
    ``(1/N) sum_i 1{E0} v0_i / pi0_i`` alone (the terms of the full-control users).
    """
    (e1, e0), (v1, v0), (pi1, pi0) = exposed, values, probabilities
    rows1, rows0 = np.flatnonzero(e1 & kept), np.flatnonzero(e0 & kept)
    control = _pair_sum(design.incidence, rows0, v0, pi0, design.all_control)
    variance = _pair_sum(design.incidence, rows1, v1, pi1, design.all_treated) + control
    rows = np.concatenate((rows1, rows0))
    if rows.size:
        overlap = design.incidence[rows] @ design.incidence[np.flatnonzero(kept)].T
        n_overlapping = np.asarray((overlap > 0).sum(axis=1)).ravel()
        bound = np.concatenate((v1[rows1] ** 2 / pi1[rows1], v0[rows0] ** 2 / pi0[rows0]))
        variance += float(np.dot(n_overlapping, bound))
        control += float(np.dot(n_overlapping[rows1.size:], bound[rows1.size:]))
    scale = int(kept.sum()) ** 2
    return variance / scale, control / scale


def _check_inputs(panel: OutcomePanel, schedule: AssignmentSchedule, confidence: float,
                  method: str) -> tuple[float, _ExposureDesign]:
    confidence = check_common_inputs(panel, schedule, confidence, method)
    return confidence, _exposure_design(schedule, method)


def _prepare(panel: OutcomePanel, design: _ExposureDesign, method: str) -> tuple:
    """Return outcomes, the users kept, their exposures (kept only) and probabilities."""
    pi1, pi0 = design.probabilities()
    kept = (pi1 > 0) & (pi0 > 0)
    if not np.all(kept):
        warnings.warn(f"{method}: {int((~kept).sum())} users can never reach full-treatment "
                      "or full-control exposure and are left out of the estimand",
                      DegenerateEstimateWarning, stacklevel=3)
    e1, e0 = design.exposures()
    return panel.user_outcome(), kept, (e1 & kept, e0 & kept), (pi1, pi0)


def horvitz_thompson_exposure(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                              confidence: float = 0.95) -> Estimate:
    """Estimate the GTE by inverse exposure-probability weighting (Horvitz-Thompson).

    Parameters
    ----------
    panel : OutcomePanel
        Outcomes of the world (``panel.user_outcome()`` per user).
    schedule : AssignmentSchedule
        A static ``"bernoulli"`` or ``"complete"`` cluster schedule with
        ``exposure_units`` set.
    confidence : float, default 0.95
        Level of the normal-approximation confidence interval, in (0, 1).

    Returns
    -------
    Estimate
        ``method="horvitz_thompson_exposure"``; ``n_units`` is ``N``, the number of
        users in the estimand (those whose two exposure probabilities are positive).

    Raises
    ------
    ValueError
        As :func:`exposure_probabilities`, or if panel and schedule hold different
        numbers of users, or ``confidence`` is outside (0, 1).

    Warns
    -----
    DegenerateEstimateWarning
        When some users have a zero exposure probability (possible under complete
        randomization with ``k_i > m``); they are left out, and every field is NaN
        if no user is left.

    Notes
    -----
    ``point = (1/N) sum_i [Y_i 1{E1_i} / pi1_i - Y_i 1{E0_i} / pi0_i]``, unbiased for
    the GTE when each outcome depends only on the arms of the clusters in ``S_i``
    (Ugander et al. 2013; Aronow & Samii 2017).

    The variance is Aronow & Samii's (2017) conservative estimator: the unbiased
    Horvitz-Thompson estimate of ``Var(sum 1{E1} Y / pi1)`` and of the control
    analogue, over the pairs of users whose ``S`` overlap, plus Young's bound
    ``Y_i(1) Y_j(0) <= (Y_i(1)^2 + Y_j(0)^2) / 2`` for the overlapping pairs, which
    can never be in opposite exposures together. Pairs whose ``S`` are disjoint
    are independent under Bernoulli clusters. Under complete randomization their
    terms, and those of pairs too large to be fully treated (or in control)
    together, have the sign that makes leaving them out conservative for
    non-negative outcomes such as fulfilled orders. So ``E[V-hat] >= Var`` holds
    exactly for Bernoulli clusters, and under complete randomization when
    outcomes are non-negative.

    Examples
    --------
    >>> touched = [[0], [0, 1], [0, 1], [1, 2], [1, 2], [2]]
    >>> rows = np.repeat(np.arange(6), [len(t) for t in touched])
    >>> units = sparse.csr_array((np.ones(rows.size), (rows, np.concatenate(touched))),
    ...                          shape=(6, 3))
    >>> schedule = AssignmentSchedule(
    ...     unit_of_user=np.array([0, 0, 1, 1, 2, 2]), is_treated=np.array([[1], [1], [0]], bool),
    ...     period_start_ticks=[0], n_ticks=1, treated_probability=0.5, unit_kind="cluster",
    ...     randomization="bernoulli", exposure_units=units)
    >>> panel = OutcomePanel.from_arrays(fulfilled=np.array([3, 4, 5, 4, 5, 3]))
    >>> horvitz_thompson_exposure(panel, schedule).point  # (6 + 16 + 20 - 6) / 6
    6.0
    """
    method = "horvitz_thompson_exposure"
    confidence, design = _check_inputs(panel, schedule, confidence, method)
    outcome, kept, (e1, e0), (pi1, pi0) = _prepare(panel, design, method)
    n_kept = int(kept.sum())
    if n_kept == 0:
        return degenerate_estimate(method, "no user can reach both exposures", n_units=0)
    point = float((np.sum(outcome[e1] / pi1[e1]) - np.sum(outcome[e0] / pi0[e0])) / n_kept)
    variance, control_variance = _aronow_samii_variance(design, kept, (e1, e0),
                                                        (outcome, outcome), (pi1, pi0))
    estimate = build_estimate(point, variance, confidence=confidence, method=method,
                              n_units=n_kept)
    # the control mean's own variance: the same bound over the full-control users alone
    return with_control_mean(estimate, float(np.sum(outcome[e0] / pi0[e0]) / n_kept),
                             control_variance)


def hajek_exposure(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                   confidence: float = 0.95) -> Estimate:
    """Estimate the GTE by the ratio (Hajek) form of the exposure estimator.

    Parameters
    ----------
    panel, schedule, confidence
        As :func:`horvitz_thompson_exposure`.

    Returns
    -------
    Estimate
        ``method="hajek_exposure"``; ``n_units`` as :func:`horvitz_thompson_exposure`.

    Raises
    ------
    ValueError
        As :func:`horvitz_thompson_exposure`.

    Warns
    -----
    DegenerateEstimateWarning
        As :func:`horvitz_thompson_exposure`, and when no user is in one of the
        two exposures (every field NaN).

    Notes
    -----
    ``point = sum 1{E1} Y / pi1 / sum 1{E1} / pi1 - sum 1{E0} Y / pi0 / sum 1{E0} / pi0``:
    the difference of inverse-probability-weighted means of the exposed users.
    It is consistent with an ``O(1/N)`` bias, does not move when a constant is
    added to every outcome, and usually varies far less than the
    Horvitz-Thompson form (Aronow & Samii 2017). The variance linearizes the
    ratio: the conservative variance of :func:`horvitz_thompson_exposure` applied
    to the residuals ``Y_i - mean_1`` (full-treatment users) and ``Y_i - mean_0``
    (full-control users). The interval is normal.

    Examples
    --------
    >>> touched = [[0], [0, 1], [0, 1], [1, 2], [1, 2], [2]]
    >>> rows = np.repeat(np.arange(6), [len(t) for t in touched])
    >>> units = sparse.csr_array((np.ones(rows.size), (rows, np.concatenate(touched))),
    ...                          shape=(6, 3))
    >>> schedule = AssignmentSchedule(
    ...     unit_of_user=np.array([0, 0, 1, 1, 2, 2]), is_treated=np.array([[1], [1], [0]], bool),
    ...     period_start_ticks=[0], n_ticks=1, treated_probability=0.5, unit_kind="cluster",
    ...     randomization="bernoulli", exposure_units=units)
    >>> panel = OutcomePanel.from_arrays(fulfilled=np.array([3, 4, 5, 4, 5, 3]))
    >>> round(hajek_exposure(panel, schedule).point, 12)  # (6 + 16 + 20) / (2 + 4 + 4) - 3
    1.2
    """
    method = "hajek_exposure"
    confidence, design = _check_inputs(panel, schedule, confidence, method)
    outcome, kept, (e1, e0), (pi1, pi0) = _prepare(panel, design, method)
    n_kept = int(kept.sum())
    if not (e1.any() and e0.any()):
        return degenerate_estimate(method, "no user is in one of the two exposures",
                                   n_units=n_kept)
    mean1 = np.sum(outcome[e1] / pi1[e1]) / np.sum(1.0 / pi1[e1])
    mean0 = np.sum(outcome[e0] / pi0[e0]) / np.sum(1.0 / pi0[e0])
    variance, control_variance = _aronow_samii_variance(
        design, kept, (e1, e0), (outcome - mean1, outcome - mean0), (pi1, pi0))
    estimate = build_estimate(float(mean1 - mean0), variance, confidence=confidence,
                              method=method, n_units=n_kept)
    return with_control_mean(estimate, float(mean0), control_variance)
