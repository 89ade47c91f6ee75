"""Switchback estimator and the minimax switchback design helpers.

A switchback schedule treats whole units (the market, or each stock pool) in
time blocks: period ``k`` of unit ``u`` is one *block*. Carryover makes the first
ticks after a switch look like the previous arm, so :func:`switchback_difference`
can leave out ``burn_in_ticks`` at the start of every block that switched arm.

:func:`switchback_optimal_points` and :func:`switchback_exposure_probabilities`
reproduce the minimax design and exposure probabilities of Bojinov, Simchi-Levi
& Zhao (2023) for an outcome with carryover of order ``m`` (as presented in
Facure 2023, ch. 10). They count ticks from **1**, as the paper does: point ``t``
is tick ``t - 1`` of a schedule's ``period_start_ticks``.
"""

from __future__ import annotations

import numbers

import numpy as np

from spillgauge.estimators._inference import (
    build_estimate,
    check_common_inputs,
    check_over_time,
    degenerate_estimate,
)
from spillgauge.estimators.estimate import Estimate
from spillgauge.estimators.relative import with_control_mean
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

# working model of the block variance: share of a block-hour's variance shared by the whole
# block (a day's market shock); calibrated on tests/calibration's switchback worlds
BLOCK_SHARE = 1.0

__all__ = [
    "switchback_difference",
    "switchback_optimal_points",
    "switchback_exposure_probabilities",
]


def _is_int(value: object) -> bool:
    return isinstance(value, numbers.Integral) and not isinstance(value, (bool, np.bool_))


def _check_inputs(panel: OutcomePanel, schedule: AssignmentSchedule, confidence: float,
                  burn_in_ticks: int, method: str) -> float:
    confidence = check_common_inputs(panel, schedule, confidence, method)
    check_over_time(panel, schedule, method, allow_market=True)
    if not _is_int(burn_in_ticks) or burn_in_ticks < 0:
        raise ValueError(f"{method}: burn_in_ticks must be an int >= 0; got {burn_in_ticks!r}")
    return confidence


def _switched(schedule: AssignmentSchedule) -> np.ndarray:
    """Return which blocks switched arm, shape ``(n_units, n_periods)``.

    Before the horizon every unit is in control, so a treated first block switched.
    """
    is_treated = schedule.is_treated
    before = np.zeros((schedule.n_units, 1), dtype=bool)
    return is_treated != np.concatenate((before, is_treated[:, :-1]), axis=1)


def switchback_difference(panel: OutcomePanel, schedule: AssignmentSchedule, *,
                          confidence: float = 0.95, burn_in_ticks: int = 0) -> Estimate:
    """Estimate the GTE by comparing treated and control blocks of a switchback.

    Parameters
    ----------
    panel : OutcomePanel
        Outcomes of the world; the unit-tick outcome is the sum of
        ``panel.pool_outcome`` over the unit's pools divided by its users.
    schedule : AssignmentSchedule
        A schedule over time blocks with ``unit_kind`` ``"market"`` (one unit, all
        users) or ``"pool"`` (unit ``u`` is pool ``u``, so
        ``schedule.unit_of_user == panel.pool_of_user``; trailing pools without
        users may have no unit).
    confidence : float, default 0.95
        Level of the confidence interval, in (0, 1).
    burn_in_ticks : int, default 0
        The first ``burn_in_ticks`` of every block whose arm differs from the
        previous block of the same unit are left out: carryover from the previous
        arm makes them look like it. Before the horizon every unit counts as in
        control, so a treated first block has switched.

    Returns
    -------
    Estimate
        ``method="switchback_difference"``; ``n_units`` is the number of blocks
        (unit, period) used.

    Raises
    ------
    ValueError
        If panel and schedule disagree on users or ticks, the units are neither
        the market nor the pools, ``burn_in_ticks`` is not an int >= 0, or
        ``confidence`` is outside (0, 1).

    Warns
    -----
    DegenerateEstimateWarning
        If an arm has no block (every field NaN) or fewer than 2 blocks (point
        kept, standard error and interval NaN).

    Notes
    -----
    The estimate is stratified by the position ``j`` of a tick within its block
    (ticks since the block started). With ``F_bj`` the orders fulfilled in block
    ``b`` at position ``j``, ``N_b`` its unit's users, ``A_aj`` the blocks of arm
    ``a`` used at position ``j`` and ``c_j`` the number of periods that have a
    position ``j``,

    ``point = sum_j c_j (r_1j - r_0j)``,  ``r_aj = sum_{A_aj} F_bj / sum_{A_aj} N_b``:

    the per-user-tick effect at every position within a block, summed over the
    horizon (orders per user). Without burn-in every block is used at every
    position, and with equal blocks the point is the horizon times the
    difference of the arms' per-user-tick rates. With burn-in, a position inside
    the burn-in uses only blocks that did *not* switch (their first ticks are
    free of the previous arm), so the early hours of a block are still
    represented: simply dropping them would scale the effect of the later hours
    up to the whole horizon, which is biased whenever the effect varies within a
    block (a diurnal rhythm, a shelf that empties by evening). A position with
    no unswitched block in an arm falls back to all of that arm's blocks.

    The variance treats blocks as clusters: with the linearization
    ``psi_b = s_a sum_j c_j (F_bj - r_aj N_b) / W_aj`` (``W_aj`` the users of
    ``A_aj``, ``s_a`` = +1 treated, -1 control), ``V = sum_a kappa_a
    sum_{b in a} psi_b^2``. The factor ``kappa_a`` counts the blocks that inform
    each position (see ``_block_correction``): with equal blocks and no burn-in
    it is ``B_a / (B_a - 1)`` and ``V`` is the Neyman variance of block means times
    the horizon squared, but a burn-in position estimated from the few blocks of
    an arm that did not switch weighs as the few blocks it rests on. The interval
    uses Student's t with Satterthwaite-type degrees of freedom from the same
    working model (Bell & McCaffrey 2002; Pustejovsky & Tipton 2018): ``B - 2``
    for equal arms without burn-in, fewer when an arm is small or burn-in hours
    rest on few blocks (Bojinov, Simchi-Levi & Zhao 2023 analyse switchbacks
    block by block).

    Examples
    --------
    One market of 2 users, 4 periods of 2 ticks, arms T C C T:

    >>> per_user = np.array([2, 3, 1, 1, 0, 3, 4, 3])
    >>> panel = OutcomePanel.from_arrays(fulfilled=np.stack([per_user, per_user]))
    >>> schedule = AssignmentSchedule(
    ...     unit_of_user=np.zeros(2, int), is_treated=np.array([[1, 0, 0, 1]], bool),
    ...     period_start_ticks=[0, 2, 4, 6], n_ticks=8, treated_probability=0.5,
    ...     unit_kind="market", randomization="complete")
    >>> est = switchback_difference(panel, schedule)
    >>> est.point, round(est.standard_error ** 2, 6), est.n_units  # 8 * (3 - 1.25)
    (14.0, 20.0, 4)
    >>> switchback_difference(panel, schedule, burn_in_ticks=1).point  # 4 * (3 - 0 + 3 - 2)
    16.0
    """
    method = "switchback_difference"
    confidence = _check_inputs(panel, schedule, confidence, burn_in_ticks, method)
    fulfilled = np.asarray(panel.pool_outcome, dtype=float)
    if schedule.unit_kind == "market":
        unit_totals = fulfilled.sum(axis=0, keepdims=True)
        unit_users = np.array([panel.n_users], dtype=float)
    else:  # unit u is pool u; pools past the last unit hold no user and are left out
        unit_totals = fulfilled[: schedule.n_units]
        unit_users = panel.users_per_pool()[: schedule.n_units].astype(float)
    lengths = schedule.period_lengths()
    block_length = int(lengths.max())
    position = np.arange(block_length)
    exists = position[None, :] < lengths[:, None]                     # (n_periods, L)
    ticks = np.minimum(schedule.period_start_ticks[:, None] + position[None, :],
                       schedule.n_ticks - 1)
    values = np.where(exists[None], unit_totals[:, ticks], 0.0)       # (units, periods, L)
    has_users = unit_users > 0
    cell = exists[None] & has_users[:, None, None]
    clean = cell & ~(_switched(schedule)[:, :, None] & (position < burn_in_ticks))
    treated = np.broadcast_to(schedule.is_treated[:, :, None], cell.shape)
    weights = np.broadcast_to(unit_users[:, None, None], cell.shape)
    count = exists.sum(axis=0).astype(float)                           # c_j
    point = 0.0
    used = np.zeros(cell.shape, dtype=bool)
    rates, totals = [], []
    for arm in (treated, ~treated):
        in_arm = cell & arm
        chosen = clean & arm
        fallback = ~chosen.any(axis=(0, 1))
        chosen = chosen | (in_arm & fallback[None, None, :])
        users = (weights * chosen).sum(axis=(0, 1))
        orders = (values * chosen).sum(axis=(0, 1))
        if not (users > 0).any():
            name = "treated" if arm is treated else "control"
            return degenerate_estimate(method, f"the {name} arm has no block",
                                       n_units=int(cell.any(axis=2).sum()))
        with np.errstate(invalid="ignore", divide="ignore"):
            rate = np.where(users > 0, orders / users, np.nan)
        rates.append(rate)
        totals.append(users)
        used |= chosen
    difference = rates[0] - rates[1]
    missing = ~np.isfinite(difference) & (count > 0)
    if missing.any():
        return degenerate_estimate(method, "some position within a block has no block of one "
                                   "arm", n_units=int(used.any(axis=2).sum()))
    point = float(np.sum(count * np.nan_to_num(difference)))
    block_used = used.any(axis=2)
    n_blocks = int(block_used.sum())
    variance, parts = 0.0, []
    for k, arm in enumerate((schedule.is_treated, ~schedule.is_treated)):
        blocks = block_used & arm
        n_arm = int(blocks.sum())
        if n_arm < 2:
            return degenerate_estimate(method, "an arm has a single block, so the block-level "
                                       "variance is undefined", n_units=n_blocks, point=point)
        chosen = used & arm[:, :, None]
        with np.errstate(invalid="ignore", divide="ignore"):
            share = np.where(totals[k] > 0, count / totals[k], 0.0)
        residual = np.where(chosen, values - np.nan_to_num(rates[k])[None, None, :] * weights,
                            0.0)
        psi = (residual * share[None, None, :]).sum(axis=2)[blocks]
        users_block = np.where(chosen, weights, 0.0)[blocks]
        factor, expected, spread = _block_correction(
            users_block, totals[k], share, np.nan_to_num(rates[k]))
        if not expected > 0:
            return degenerate_estimate(method, "every position of an arm rests on a single "
                                       "block, so the block-level variance is undefined",
                                       n_units=n_blocks, point=point)
        variance += factor * float(np.sum(psi ** 2))
        parts.append((factor * expected, factor ** 2 * spread))
    df = sum(e for e, _ in parts) ** 2 / sum(s for _, s in parts)
    estimate = build_estimate(point, variance, confidence=confidence, method=method,
                              n_units=n_blocks, df=df)
    # the control blocks' rate per user over the horizon; its variance is the second arm's term
    return with_control_mean(estimate, float(np.sum(count * np.nan_to_num(rates[1]))),
                             factor * float(np.sum(psi ** 2)))


def _block_correction(users_used: np.ndarray, arm_users: np.ndarray, share: np.ndarray,
                      rate: np.ndarray, *, block_share: float = BLOCK_SHARE
                      ) -> tuple[float, float, float]:
    """Return one arm's small-sample factor and the moments behind its degrees of freedom.

    Parameters
    ----------
    users_used : ndarray, shape (B_a, L)
        ``N_b`` where block ``b`` of the arm is used at position ``j``, else 0.
    arm_users : ndarray, shape (L,)
        ``W_aj``, the users of the blocks used at each position.
    share : ndarray, shape (L,)
        ``lambda_j = c_j / W_aj``, the weight of a position's orders in the estimate.
    rate : ndarray, shape (L,)
        The arm's orders per user-tick at each position, ``r_aj``.

    Returns
    -------
    factor, trace, trace_square : float
        ``kappa = v / tr(C)``, ``tr(C)`` and ``tr(C^2)`` (see Notes).

    Notes
    -----
    Working model (Bell & McCaffrey 2002; Pustejovsky & Tipton 2018): the orders
    ``F_bj`` of block ``b`` at position ``j`` are ``N_b r_j (u_b + e_bj)`` with a block
    effect ``u_b`` shared by the block's hours (a day's market shock) and
    independent hourly noise ``e_bj`` (Poisson-like, variance ``1 / (N_b r_j)``); the
    two parts weigh ``block_share`` and ``1 - block_share`` of one block-hour's
    variance. ``C`` is the covariance of the linearization ``psi_b`` under the model
    and ``v`` the arm's true share of the estimate's variance, so
    ``kappa = v / tr(C)`` makes ``sum psi_b^2`` unbiased for it. A burn-in
    position rests only on the arm's blocks that did not switch: its residuals
    are taken about a mean of few blocks, and ``kappa`` grows accordingly. With
    every block used at every position and equal blocks, ``kappa = B_a / (B_a - 1)``.
    Satterthwaite's degrees of freedom of ``sum_a kappa_a sum psi_b^2`` are
    ``(sum_a kappa_a tr C_a)^2 / sum_a kappa_a^2 tr(C_a^2)`` (``B - 2`` for two
    equal arms without burn-in).
    """
    scale = share * np.maximum(rate, 0.0)                               # lambda_j r_j
    weight = np.divide(scale, arm_users, out=np.zeros_like(share), where=arm_users > 0)
    # hourly noise: Var(F_bj) = N_b r_j, independent across cells
    noise_cov = (np.diag((users_used * share * scale).sum(axis=1))
                 - (users_used * share * weight) @ users_used.T)
    noise_var = float(np.sum(share * scale * arm_users))
    # block effect: F_bj = N_b r_j u_b; psi = Q u with Q = D - N (N w)' summed over positions
    inverse_users = np.divide(1.0, arm_users, out=np.zeros_like(share), where=arm_users > 0)
    q = np.diag((users_used * scale).sum(axis=1)) - (users_used * scale) @ (
        users_used * inverse_users).T
    block_cov = q @ q.T
    loading = (users_used * scale).sum(axis=1)
    block_var = float(loading @ loading)
    noise_norm = noise_var if noise_var > 0 else 1.0
    block_norm = block_var if block_var > 0 else 1.0
    covariance = ((1 - block_share) * noise_cov / noise_norm
                  + block_share * block_cov / block_norm)
    target = (1 - block_share) * noise_var / noise_norm + block_share * block_var / block_norm
    trace = float(np.trace(covariance))
    if not trace > 1e-12 * target:
        return np.nan, 0.0, 0.0
    return target / trace, trace, float(np.sum(covariance ** 2))


def switchback_optimal_points(n_ticks: int, m: int) -> np.ndarray:
    """Return the minimax randomization points of a switchback with carryover order ``m``.

    Parameters
    ----------
    n_ticks : int
        Horizon ``T`` in ticks; must be a multiple of ``m``.
    m : int
        Carryover order: an outcome depends on the current and ``m`` previous
        assignments.

    Returns
    -------
    ndarray of int
        The points, **1-based**: ``{1, 2m+1, 3m+1, ..., (n-2)m+1}`` with ``n = T/m``,
        i.e. a first and a last block of ``2m`` ticks and blocks of ``m`` in
        between; every tick ``1..T`` when ``m = 0``.

    Raises
    ------
    ValueError
        If the values are not ints, ``m < 0``, ``T`` is not a multiple of ``m``,
        or ``n = T/m < 4`` (the design needs at least 4 blocks of ``m``).

    Notes
    -----
    Bojinov, Simchi-Levi & Zhao (2023), Theorem on the minimax design for
    ``T = n m``, ``n >= 4``; the same points as ``[1] + [i*m+1 for i in range(2, n-1)]``
    in Facure (2023, ch. 10). Subtract 1 to get ``period_start_ticks``.

    Examples
    --------
    >>> switchback_optimal_points(12, 2).tolist()
    [1, 5, 7, 9]
    """
    if not (_is_int(n_ticks) and _is_int(m)) or n_ticks < 1 or m < 0:
        raise ValueError(f"n_ticks must be an int >= 1 and m an int >= 0; got n_ticks="
                         f"{n_ticks!r}, m={m!r}")
    if m == 0:
        return np.arange(1, n_ticks + 1)
    if n_ticks % m:
        raise ValueError(f"n_ticks={n_ticks} must be a multiple of m={m}")
    n_blocks = n_ticks // m
    if n_blocks < 4:
        raise ValueError(f"the minimax design needs n_ticks / m >= 4; got {n_ticks}/{m} = "
                         f"{n_blocks}")
    return np.concatenate(([1], np.arange(2, n_blocks - 1) * m + 1)).astype(np.int64)


def switchback_exposure_probabilities(points: np.ndarray, n_ticks: int, m: int,
                                      p: float = 0.5) -> tuple[np.ndarray, np.ndarray]:
    """Return the probabilities that ticks ``t-m..t`` are all treated or all in control.

    Parameters
    ----------
    points : array of int
        Randomization points, **1-based**, strictly increasing, starting at 1; the
        arm drawn at a point (treated with probability ``p``) holds until the next.
    n_ticks : int
        Horizon ``T`` in ticks (``points`` must be ``<= T``).
    m : int
        Carryover order, ``0 <= m < T``.
    p : float, default 0.5
        Probability that a block is treated, in (0, 1).

    Returns
    -------
    pi1, pi0 : ndarray of float, shape (n_ticks,)
        Entry ``t - 1`` is ``p^k`` (``(1 - p)^k``), ``k`` the number of blocks
        meeting ``[t - m, t]``; NaN for ``t <= m``, whose window starts before
        the horizon.

    Raises
    ------
    ValueError
        If ``points`` is not as described, ``m`` is outside ``[0, T)`` or ``p`` is
        outside (0, 1).

    Notes
    -----
    ``P(W_{t-m:t} = 1) = p^{number of randomization blocks intersecting [t-m, t]}``
    (Bojinov, Simchi-Levi & Zhao 2023; Facure 2023, ch. 10).

    Examples
    --------
    >>> pi1, pi0 = switchback_exposure_probabilities([1, 4], n_ticks=6, m=2)
    >>> pi1.tolist()
    [nan, nan, 0.5, 0.25, 0.25, 0.5]
    """
    points = np.asarray(points)
    if not (_is_int(n_ticks) and _is_int(m)) or n_ticks < 1 or not 0 <= m < n_ticks:
        raise ValueError(f"n_ticks must be an int >= 1 and m an int in [0, n_ticks); got "
                         f"n_ticks={n_ticks!r}, m={m!r}")
    if (points.ndim != 1 or points.size == 0 or not np.issubdtype(points.dtype, np.integer)
            or points[0] != 1 or np.any(np.diff(points) <= 0) or points[-1] > n_ticks):
        raise ValueError("points must be strictly increasing ints starting at 1 and at most "
                         f"n_ticks={n_ticks}")
    if not (isinstance(p, numbers.Real) and 0.0 < float(p) < 1.0):
        raise ValueError(f"p must be in (0, 1); got {p!r}")
    ticks = np.arange(1, n_ticks + 1)
    block = np.searchsorted(points, ticks, side="right")
    window_start = np.searchsorted(points, np.maximum(ticks - m, 1), side="right")
    n_blocks = (block - window_start + 1).astype(float)
    n_blocks[:m] = np.nan
    return float(p) ** n_blocks, (1.0 - float(p)) ** n_blocks
