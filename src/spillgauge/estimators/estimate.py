"""Estimate: the small result every estimator returns."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Estimate"]


@dataclass(frozen=True, slots=True)
class Estimate:
    """One design's estimate of the GTE in one world.

    All values are on the GTE's scale: fulfilled orders per user over the horizon.

    Parameters
    ----------
    point : float
        The estimate.
    standard_error : float
        Its estimated standard error.
    ci_low, ci_high : float
        Confidence interval at the requested level.
    method : str
        Full name of the estimator, e.g. ``"difference_in_means"``.
    n_units : int
        Number of units (users, clusters, blocks) the estimate used.
    """

    point: float
    standard_error: float
    ci_low: float
    ci_high: float
    method: str
    n_units: int = 0
