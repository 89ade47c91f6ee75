"""Scenario keys: the checks every TOML value goes through, and declared design keys.

A :class:`DesignKey` declares one key of a design kind once: its type, default,
allowed values or range, and a line of documentation. Validation, error
messages and the key reference in ``docs/scenario.md`` are all derived from the
declaration, so they cannot drift apart.
"""

from __future__ import annotations

import math
import types
import typing
from dataclasses import dataclass

from spillgauge.errors import ScenarioError

__all__ = ["DesignKey", "check", "coerce", "type_name"]


def check(condition: bool, key: str, expected: str, got: object) -> None:
    """Raise :class:`ScenarioError` for ``key`` unless ``condition`` holds."""
    if not condition:
        raise ScenarioError(key, expected, got)


def type_name(tp: object) -> str:
    """Return a type as a scenario author reads it (``int`` -> ``"an int"``)."""
    names = {int: "an int", float: "a number", str: "a string", bool: "true or false"}
    return names.get(tp, str(tp))


def coerce(value: object, annotation: object, key: str) -> object:
    """Check one TOML value against a type annotation; ints are accepted for floats.

    >>> coerce(2, float, "pools.stock_cover")
    2.0
    >>> coerce("x", int, "pools.count")
    Traceback (most recent call last):
    ...
    spillgauge.errors.ScenarioError: pools.count must be an int; got 'x'
    """
    allowed = typing.get_args(annotation) if isinstance(annotation, types.UnionType) else (
        annotation,)
    if value is None and type(None) in allowed:
        return None
    for tp in allowed:
        if tp is bool and isinstance(value, bool):
            return value
        if tp is int and isinstance(value, int) and not isinstance(value, bool):
            return value
        if tp is float and isinstance(value, (int, float)) and not isinstance(value, bool):
            if not math.isfinite(float(value)):
                raise ScenarioError(key, "a finite number", value)
            return float(value)
        if tp is str and isinstance(value, str):
            return value
    expected = " or ".join(type_name(tp) for tp in allowed if tp is not type(None))
    raise ScenarioError(key, expected, value)


@dataclass(frozen=True, slots=True, kw_only=True)
class DesignKey:
    """One key of a ``[[design]]`` table, declared once by its design kind.

    Parameters
    ----------
    name : str
        The key as written in the scenario file.
    type : type
        ``int``, ``float``, ``str`` or ``bool``.
    default : object
        Value when the key is absent.
    doc : str
        One line for the key reference.
    choices : tuple, optional
        The allowed values (for strings).
    minimum, maximum : float, optional
        Bounds of a number; open (excluded) when ``exclusive_minimum`` /
        ``exclusive_maximum`` is set.

    Examples
    --------
    >>> k = DesignKey(name="share", type=float, default=0.5, doc="treated share",
    ...               minimum=0, maximum=1, exclusive_minimum=True, exclusive_maximum=True)
    >>> k.expected(), k.validate(0.3, "design[0].share")
    ('in (0, 1)', 0.3)
    """

    name: str
    type: type
    default: object
    doc: str
    choices: tuple = ()
    minimum: float | None = None
    maximum: float | None = None
    exclusive_minimum: bool = False
    exclusive_maximum: bool = False

    @property
    def is_numeric(self) -> bool:
        """Whether the key holds a number (so a sweep can vary it)."""
        return self.type in (int, float)

    def expected(self) -> str:
        """Return what the key accepts, in the words of an error message."""
        if self.choices:
            quoted = [repr(c) for c in self.choices]
            return quoted[0] if len(quoted) == 1 else \
                ", ".join(quoted[:-1]) + " or " + quoted[-1]
        if self.type is bool:
            return "true or false"
        prefix = "an int " if self.type is int else ""
        low, high = self.minimum, self.maximum
        if low is not None and high is not None:
            return (f"{prefix}in {'(' if self.exclusive_minimum else '['}{low:g}, "
                    f"{high:g}{')' if self.exclusive_maximum else ']'}")
        if low is not None:
            return f"{prefix or 'a number '}{'>' if self.exclusive_minimum else '>='} {low:g}"
        if high is not None:
            return f"{prefix or 'a number '}{'<' if self.exclusive_maximum else '<='} {high:g}"
        return type_name(self.type)

    def validate(self, value: object, field: str) -> object:
        """Return ``value`` checked and typed, or raise :class:`ScenarioError` naming ``field``."""
        value = coerce(value, self.type, field)
        if self.choices:
            check(value in self.choices, field, self.expected(), value)
        if self.minimum is not None:
            check(value > self.minimum if self.exclusive_minimum else value >= self.minimum,
                  field, self.expected(), value)
        if self.maximum is not None:
            check(value < self.maximum if self.exclusive_maximum else value <= self.maximum,
                  field, self.expected(), value)
        return value
