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

import dataclasses
import math
import numbers

import numpy as np

from spillgauge.estimators._inference import (
    build_estimate,
    check_common_inputs,
    check_over_time,
    degenerate_estimate,
)
from spillgauge.estimators._switchback_inference import (
    adjacent_pairs,
    block_moments,
    bound_form,
    bound_weights,
    dense_block_matrix,
    sparse_low_rank_moments,
    working_model_df,
)
from spillgauge.estimators.estimate import Estimate
from spillgauge.estimators.relative import with_control_mean
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

# up to this many blocks the interval's t reference is the studentized estimate's exact
# distribution under the working model (dense (B, B) arrays); beyond it, Satterthwaite's
EXACT_DF_BLOCKS = 400

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
    rates, totals, fallbacks = [], [], []
    for arm in (treated, ~treated):
        in_arm = cell & arm
        chosen = clean & arm
        fallback = ~chosen.any(axis=(0, 1))
        fallbacks.append(fallback)
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
    arms = []
    for k, arm in enumerate((schedule.is_treated, ~schedule.is_treated)):
        blocks = block_used & arm
        if int(blocks.sum()) < 2:
            return degenerate_estimate(method, "an arm has a single block, so the block-level "
                                       "variance is undefined", n_units=n_blocks, point=point)
        chosen = used & arm[:, :, None]
        with np.errstate(invalid="ignore", divide="ignore"):
            share = np.where(totals[k] > 0, count / totals[k], 0.0)
        residual = np.where(chosen, values - np.nan_to_num(rates[k])[None, None, :] * weights,
                            0.0) * share[None, None, :]
        early = (position < burn_in_ticks) & ~fallbacks[k]
        first, second = adjacent_pairs(blocks, chosen[:, :, early].any(axis=2))
        arms.append(_ArmScores(
            sign=1.0 if k == 0 else -1.0, psi=residual.sum(axis=2)[blocks],
            psi_early=residual[:, :, early].sum(axis=2)[blocks], first=first, second=second,
            users=np.where(chosen, weights, 0.0)[blocks], arm_users=totals[k],
            scale=share * np.maximum(np.nan_to_num(rates[k]), 0.0), early=early))
    exact_df = n_blocks <= EXACT_DF_BLOCKS
    variance, terms, df = _block_variance(arms, confidence, exact_df=exact_df)
    if variance is None or not variance > 0:
        # the lag-1 products outweigh the squares (or cancel them: two consecutive blocks
        # alone in an arm), so the products' bound instead
        variance, terms, df = _block_variance(arms, confidence, exact_df=exact_df, bound=True)
    if variance is None:
        return degenerate_estimate(method, "every position of an arm rests on a single "
                                   "block, so the block-level variance is undefined",
                                   n_units=n_blocks, point=point)
    if not variance > 0:
        return degenerate_estimate(method, "the block-level variance is not positive",
                                   n_units=n_blocks, point=point)
    arm_term = terms[1]
    estimate = build_estimate(point, variance, confidence=confidence, method=method,
                              n_units=n_blocks, df=df)
    # the control blocks' rate per user over the horizon; its variance is the second arm's term
    return with_control_mean(estimate, float(np.sum(count * np.nan_to_num(rates[1]))),
                             arm_term)


@dataclasses.dataclass(frozen=True)
class _ArmScores:
    """One arm's block scores and what its working model needs (see ``block_moments``)."""

    sign: float             # +1 treated, -1 control
    psi: np.ndarray         # (B_a,) the blocks' linearization
    psi_early: np.ndarray   # (B_a,) the same over the burn-in positions
    first: np.ndarray       # consecutive blocks of a unit, the second using burn-in hours
    second: np.ndarray
    users: np.ndarray       # (B_a, L) N_b where the block is used at position j
    arm_users: np.ndarray   # (L,) W_aj
    scale: np.ndarray       # (L,) c_j r_aj / W_aj
    early: np.ndarray       # (L,) the burn-in positions


def _block_variance(arms: list[_ArmScores], confidence: float, *, exact_df: bool,
                    bound: bool = False) -> tuple[float | None, list[float], float]:
    """Return the block-level variance, each arm's term and the interval's df.

    ``bound=False``: the squares plus the lag-1 products (unbiased, not always
    positive); ``bound=True``: each product ``2 xy`` replaced by ``x^2 + y^2``
    (positive, conservative). Each arm's term carries the factor that makes it
    unbiased under the working model. None when an arm's model variance has no
    trace (every position rests on a single block).
    """
    terms, parts, forms = [], [], []
    for arm in arms:
        inputs = (arm.users, arm.arm_users, arm.scale, arm.early, arm.first, arm.second)
        if bound:
            loading, diagonal, left, right = bound_form(*inputs)
            expected = float(np.sum(loading ** 2))
            trace, trace_square = sparse_low_rank_moments(diagonal, left, right)
            opens, closes = bound_weights(arm.first, arm.second, arm.psi.size)
            raw = float(np.sum(opens * arm.psi ** 2) + np.sum(closes * arm.psi_early ** 2))
        else:
            expected, trace, trace_square = block_moments(*inputs)
            raw = float(np.sum(arm.psi ** 2)
                        + 2 * np.sum(arm.psi[arm.first] * arm.psi_early[arm.second]))
        if not trace > 1e-12 * expected:
            return None, [], math.nan
        factor = expected / trace
        terms.append(factor * raw)
        parts.append((expected, factor ** 2 * trace_square))
        if exact_df:
            if bound:
                matrix = np.diag(diagonal) + left @ right.T
            else:
                loading, matrix = dense_block_matrix(*inputs)
            forms.append((arm.sign * loading, factor * matrix))
    df = sum(e for e, _ in parts) ** 2 / sum(v for _, v in parts)
    if forms:
        df = working_model_df(forms, confidence, fallback=df)
    return sum(terms), terms, df


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
