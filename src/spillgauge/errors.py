"""Exceptions and warnings raised by spillgauge."""

from __future__ import annotations

__all__ = [
    "SpillgaugeError",
    "ScenarioError",
    "ResultsError",
    "MemoryLimitError",
    "DegenerateEstimateWarning",
    "PeriodWeightWarning",
]


class SpillgaugeError(Exception):
    """Base class of every error spillgauge raises on purpose."""


class ScenarioError(SpillgaugeError, ValueError):
    """A scenario value (file key, CSV column, CLI option) is missing or not allowed.

    Parameters
    ----------
    field : str
        Dotted path of the offending value, e.g. ``"pools.lead_time_hours"``.
    expected : str
        What is allowed, in words.
    got : object
        The value received. Strings are quoted in the message.

    Examples
    --------
    >>> err = ScenarioError("pools.lead_time_hours", "in [0, restock_every_hours=12)", 30)
    >>> str(err)
    'pools.lead_time_hours must be in [0, restock_every_hours=12); got 30'
    >>> err.field
    'pools.lead_time_hours'
    """

    def __init__(self, field: str, expected: str, got: object) -> None:
        self.field = field
        self.expected = expected
        self.got = got
        shown = repr(got) if isinstance(got, str) else str(got)
        if len(shown) > 120:
            shown = shown[:117] + "..."
        super().__init__(f"{field} must be {expected}; got {shown}")

    def __reduce__(self):
        # Keep the three parts when the error crosses a process boundary (workers).
        return (type(self), (self.field, self.expected, self.got))


class ResultsError(SpillgaugeError):
    """A results folder cannot be used (it belongs to another study, or is incomplete)."""


class MemoryLimitError(SpillgaugeError):
    """The run would need more memory than the machine has."""


class DegenerateEstimateWarning(RuntimeWarning):
    """An estimator got legal but degenerate input (an empty arm, one cluster) and returned NaN."""


class PeriodWeightWarning(UserWarning):
    """An estimator weighs the periods of a design unlike the GTE (two-way fixed effects)."""
