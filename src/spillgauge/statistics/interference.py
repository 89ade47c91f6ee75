"""The test of interference over a study's replications: how often it rejects, and the verdict."""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

__all__ = ["InterferenceSummary", "summarise_interference_test"]


@dataclass(frozen=True, slots=True)
class InterferenceSummary:
    """A test-of-interference design summarised over the replications.

    Parameters
    ----------
    n_reps : int
        Replications where the test produced a statistic.
    rejection_rate, rejection_rate_se : float
        Share of those replications where the user half and the cluster half
        disagree at the study's level, with its binomial Monte Carlo SE.
    chebyshev_rejection_rate, chebyshev_rejection_rate_se : float
        The same for the distribution-free threshold ``1 / sqrt(alpha)``.
    mean_delta, mean_delta_se : float
        Mean difference, user half minus cluster half (orders per user), with its
        Monte Carlo SE.
    is_detected : bool
        Whether interference is detected: the rejection rate exceeds the test's
        level by more than two Monte Carlo SEs (common practice, no source).
    """

    n_reps: int
    rejection_rate: float
    rejection_rate_se: float
    chebyshev_rejection_rate: float
    chebyshev_rejection_rate_se: float
    mean_delta: float
    mean_delta_se: float
    is_detected: bool

    def to_dict(self) -> dict:
        """Return the fields saved in ``summary.json`` (the verdict is not saved)."""
        out = asdict(self)
        del out["is_detected"]
        return out


def _rate(flags: np.ndarray) -> tuple[float, float]:
    n = flags.size
    rate = float(flags.mean()) if n else float("nan")
    return rate, (float(np.sqrt(rate * (1 - rate) / n)) if n else float("nan"))


def summarise_interference_test(statistic, rejects, rejects_chebyshev, delta, *,
                                alpha: float) -> InterferenceSummary:
    """Summarise a test of interference's per-replication results.

    Parameters
    ----------
    statistic, rejects, rejects_chebyshev, delta : array_like, shape (n_reps,)
        Per replication: the test statistic (NaN when there was none), whether it
        rejected (normal and Chebyshev thresholds), and the difference of the halves.
    alpha : float
        Level of the test.

    Examples
    --------
    >>> s = summarise_interference_test([1.0, 3.0, 0.5, 2.5], [0, 1, 0, 1], [0, 1, 0, 0],
    ...                                 [0.1, 0.4, 0.0, 0.3], alpha=0.05)
    >>> s.n_reps, s.rejection_rate, s.is_detected
    (4, 0.5, False)
    """
    statistic = np.asarray(statistic, dtype=float)
    usable = np.isfinite(statistic)
    n = int(usable.sum())
    rate, rate_se = _rate(np.asarray(rejects, dtype=float)[usable])
    cheb, cheb_se = _rate(np.asarray(rejects_chebyshev, dtype=float)[usable])
    delta = np.asarray(delta, dtype=float)[usable]
    mean_delta = float(delta.mean()) if n else float("nan")
    mean_delta_se = float(delta.std(ddof=1) / np.sqrt(n)) if n > 1 else float("nan")
    is_detected = bool(n and rate - 2 * (0.0 if np.isnan(rate_se) else rate_se) > alpha)
    return InterferenceSummary(n_reps=n, rejection_rate=rate, rejection_rate_se=rate_se,
                               chebyshev_rejection_rate=cheb,
                               chebyshev_rejection_rate_se=cheb_se, mean_delta=mean_delta,
                               mean_delta_se=mean_delta_se, is_detected=is_detected)
