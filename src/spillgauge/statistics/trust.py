"""The trust rule: when a design's intervals and bias can be trusted (written once, used everywhere)."""

from __future__ import annotations

import math
from dataclasses import dataclass

from spillgauge.formatting import format_number
from spillgauge.statistics.metrics import DesignMetrics

__all__ = ["TrustVerdict", "assess_trust", "is_trusted", "COVERAGE_ALLOWANCE",
           "MIN_USABLE_SHARE", "replications_for_coverage", "few_replications_note"]

COVERAGE_ALLOWANCE = 0.05  # points of coverage below nominal that are tolerated
MIN_USABLE_SHARE = 0.95  # share of replications that must give an estimate and an interval


@dataclass(frozen=True, slots=True)
class TrustVerdict:
    """Whether a design is trusted, and if not, which check failed.

    Parameters
    ----------
    is_trusted : bool
    problem : {None, "no_estimates", "unusable", "coverage", "bias"}
        The first check that failed.
    needed_coverage : float
        The coverage the design needed.
    reason : str or None
        Why it is not trusted, in words with numbers (None when it is trusted).
    """

    is_trusted: bool
    problem: str | None
    needed_coverage: float
    reason: str | None


def _zero_nan(x: float) -> float:
    return 0.0 if math.isnan(x) else x


def assess_trust(metrics: DesignMetrics, *, alpha: float = 0.05,
                 failure_note: str = "") -> TrustVerdict:
    """Apply the trust rule (see :func:`is_trusted`) and say which check failed.

    ``failure_note`` says why replications gave no estimate (an estimator's
    warning), for the reason of an unusable design.

    Examples
    --------
    >>> from spillgauge.statistics.metrics import design_metrics
    >>> m = design_metrics([2.0, 2.1, 1.9, 2.0], [0.1] * 4, [1.8, 1.9, 1.7, 1.8],
    ...                    [2.2, 2.3, 2.1, 2.2], [1.0] * 4)
    >>> v = assess_trust(m)
    >>> v.is_trusted, v.problem, v.reason
    (False, 'coverage', 'covers the GTE in 0.0% of replications (needs 90.0%)')
    """
    m = metrics
    needed = (1 - alpha) - max(COVERAGE_ALLOWANCE, 2 * _zero_nan(m.coverage_se))
    if m.n_reps == 0 or not all(map(math.isfinite, (m.coverage, m.bias, m.sd, m.rmse))):
        return TrustVerdict(False, "no_estimates", needed, "gave no usable estimates"
                            + (f" ({failure_note})" if failure_note else ""))
    if m.usable_share < MIN_USABLE_SHARE:
        total = m.n_reps + m.n_dropped
        why = (f"gave an estimate and an interval in only {m.usable_share:.0%} of "
               f"replications ({m.n_dropped} of {total} had none"
               + (f": {failure_note}" if failure_note else "") + ")")
        return TrustVerdict(False, "unusable", needed, why)
    if m.coverage < needed:
        return TrustVerdict(False, "coverage", needed,
                            f"covers the GTE in {m.coverage:.1%} of replications "
                            f"(needs {needed:.1%})")
    noise = m.error_sd if math.isfinite(m.error_sd) else m.sd
    if not (abs(m.bias) <= 2 * m.bias_se or abs(m.bias) <= 0.5 * noise):
        if noise > 0:
            why = f"has bias {format_number(m.bias, sign=True)}, {abs(m.bias) / noise:.1f} " \
                  f"times the SD of its errors"
        else:
            why = f"has bias {format_number(m.bias, sign=True)} with no spread at all"
        return TrustVerdict(False, "bias", needed, why)
    return TrustVerdict(True, None, needed, None)


def is_trusted(metrics: DesignMetrics, *, alpha: float = 0.05) -> bool:
    """Return whether a design's confidence intervals and bias can be trusted.

    Parameters
    ----------
    metrics : DesignMetrics
        The design's metrics.
    alpha : float, default 0.05
        Level of the design's confidence intervals (nominal coverage ``1 - alpha``).

    Returns
    -------
    bool
        True when all hold:

        - usable_share >= 0.95: nearly every replication gave an estimate and an
          interval (a design that often gives none cannot be run as planned);
        - coverage >= (1 - alpha) - max(0.05, 2 coverage_se): the CI covers the
          GTE nearly as often as promised (a 5-point allowance, widened when the
          Monte Carlo error is larger);
        - |bias| <= 2 bias_se or |bias| <= 0.5 error_sd: the bias is not
          detectable or is small next to the noise of the errors (each estimate
          against its own replication's GTE, so movement of the GTE between
          replications is not counted as the design's noise).

        False when coverage, bias, SD or RMSE is not finite.

    Notes
    -----
    The allowances are common practice, not from a published source. A biased
    design can keep its coverage only by having wide intervals; when its bias is
    at most half the SD of its errors that is accepted here, and the recommender
    then ranks it down by its RMSE. A design whose bias exceeds that is refused
    even if over-wide intervals keep its coverage.

    Examples
    --------
    >>> from spillgauge.statistics.metrics import design_metrics
    >>> m = design_metrics([0.9, 1.1, 1.0, 1.2], [0.1] * 4, [0.7, 0.9, 0.8, 1.0],
    ...                    [1.1, 1.3, 1.2, 1.4], [1.0] * 4)
    >>> is_trusted(m)
    True
    """
    return assess_trust(metrics, alpha=alpha).is_trusted


def replications_for_coverage(alpha: float = 0.05) -> int:
    """Return the replications at which coverage is known to within the trust rule's allowance.

    The Monte Carlo SE of a coverage near its nominal ``1 - alpha`` is
    ``sqrt(alpha (1 - alpha) / n)``, the binomial SE of a proportion (Morris,
    White & Crowther 2019, "Using simulation studies to evaluate statistical
    methods", Stat. Med. 38, their table of Monte Carlo SEs; cited from memory).
    The rule tolerates ``max(COVERAGE_ALLOWANCE, 2 SE)`` points below
    nominal, so below ``n = 4 alpha (1 - alpha) / COVERAGE_ALLOWANCE**2`` the
    tolerance widens with Monte Carlo error, and verdicts are loose.

    >>> replications_for_coverage(0.05)
    76
    """
    return math.ceil(4 * alpha * (1 - alpha) / COVERAGE_ALLOWANCE ** 2 - 1e-9)


def few_replications_note(n_reps: int, alpha: float = 0.05) -> str | None:
    """Say when a study has too few replications for its trust verdicts to be firm.

    >>> few_replications_note(40)
    'With 40 replications, CI coverage is known only to about \u00b17 points (2 Monte Carlo SE), so trust verdicts are loose: run at least 76 replications for firm ones.'
    >>> few_replications_note(200) is None
    True
    """
    needed = replications_for_coverage(alpha)
    if n_reps >= needed:
        return None
    margin = 2 * math.sqrt(alpha * (1 - alpha) / max(n_reps, 1))
    return (f"With {n_reps} replications, CI coverage is known only to about "
            f"\u00b1{100 * margin:.0f} points (2 Monte Carlo SE), so trust verdicts are loose: "
            f"run at least {needed} replications for firm ones.")
