"""The real experiment's randomization: a design's own draw in the scenario's market.

:func:`assign_design` draws the schedule exactly as a study does for
replication 0 of the same seed (the design's assignment stream, keyed by its
label, drawn by its kind in the registry), and keeps what the analysis needs
besides: the users' ids, home pools and pre-period orders, the calendar and the
scenario's fingerprint.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

import numpy as np

from spillgauge.designs.registry import kind_of
from spillgauge.errors import ScenarioError
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import ASSIGNMENT, design_key, stream

__all__ = ["Assignment", "assign_design", "parse_start", "market_fingerprint",
           "ASSIGNMENT_REPLICATION"]

ASSIGNMENT_REPLICATION = 0  # the assignment of seed S is replication 0's draw of a study with S

_MARKET_SECTIONS = ("calendar", "users", "pools", "graph", "effect")


def market_fingerprint(fingerprint: dict) -> str:
    """Return the SHA-256 of a scenario's market, calendar and effect settings and data files.

    ``fingerprint`` is :func:`spillgauge.study.store.scenario_fingerprint`'s dict
    (as ``study.json`` holds it). File paths are left out (their contents' digests
    stay), so the same data read from another folder has the same fingerprint.
    """
    settings = fingerprint.get("settings", {})
    market = {key: {k: v for k, v in settings.get(key, {}).items() if k != "file"}
              for key in _MARKET_SECTIONS}
    text = json.dumps({"settings": market, "data_files": fingerprint.get("data_files", {})},
                      sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def parse_start(text: str | datetime | None) -> datetime:
    """Return the experiment's start: a midnight, as ``YYYY-MM-DD`` or an ISO date-time.

    ``None`` gives the next midnight (UTC date). Days of the experiment are then
    calendar days, so a team's daily orders line up with the simulated days.

    >>> parse_start("2027-03-01").isoformat()
    '2027-03-01T00:00:00'
    >>> parse_start("2027-03-01T06:00")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    spillgauge.errors.ScenarioError: --start must be a midnight (...); got '2027-03-01T06:00'
    """
    if text is None:

        today = datetime.now(UTC).date()
        return datetime(today.year, today.month, today.day) + timedelta(days=1)
    if isinstance(text, datetime):
        start = text
    else:
        try:
            start = datetime.fromisoformat(str(text))
        except ValueError:
            raise ScenarioError("--start", "an ISO date or date-time (YYYY-MM-DD)", text) \
                from None
    if start.tzinfo is not None:
        raise ScenarioError("--start", "a local date-time without a time zone", str(text))
    if (start.hour, start.minute, start.second, start.microsecond) != (0, 0, 0, 0):
        raise ScenarioError("--start", "a midnight (YYYY-MM-DD or YYYY-MM-DDT00:00)", str(text))
    return start


@dataclass(frozen=True, eq=False)
class Assignment:
    """A design's randomization for one market, with what its analysis needs.

    Attributes
    ----------
    spec : DesignSpec
        The design (its kind draws and analyses it through the registry).
    schedule : AssignmentSchedule
        Who is treated when.
    seed : int
        The seed it was drawn from (replication 0's assignment stream of the study seed).
    start : datetime
        Midnight at which tick 0 starts.
    tick_hours, days : int
        The scenario's calendar.
    confidence : float
        Level of the analysis's interval (``1 - study.alpha``).
    user_ids, pool_ids : ndarray of str, shapes (n_users,), (n_pools,)
    pool_of_user : ndarray of int, shape (n_users,)
    history : ndarray of float, shape (n_users,)
        Pre-period orders of each user (the users file's ``history_orders``, else simulated).
    scenario_name, fingerprint : str
        The scenario and :func:`market_fingerprint` of its market.
    outcome : str, default "orders"
        The scenario's ``study.outcome``: what ``analyze`` estimates the effect on
        (fulfilled orders, conversion or revenue per user over the horizon).
    pre_outcome : ndarray of float, shape (n_users,), or None
        The outcome's pre-period analogue (the CUPED covariate): for revenue each
        user's pre-period revenue; None for orders and conversion, whose analogue
        follows from ``history``. See :attr:`covariate`.
    """

    spec: DesignSpec
    schedule: AssignmentSchedule
    seed: int
    start: datetime
    tick_hours: int
    days: int
    confidence: float
    user_ids: np.ndarray
    pool_ids: np.ndarray
    pool_of_user: np.ndarray
    history: np.ndarray
    scenario_name: str
    fingerprint: str
    outcome: str = "orders"
    pre_outcome: np.ndarray | None = None

    @property
    def covariate(self) -> np.ndarray:
        """The outcome's pre-period analogue per user, which CUPED adjusts for."""
        from spillgauge.worlds.outcome import pre_period_outcome

        if self.pre_outcome is not None:
            return self.pre_outcome
        return pre_period_outcome(self.outcome, self.history, None)

    @property
    def n_ticks(self) -> int:
        """Ticks in the horizon."""
        return self.days * 24 // self.tick_hours

    def tick_time(self, tick: np.ndarray | int) -> np.ndarray:
        """Return the start time of each tick, as ``datetime64[m]``."""
        origin = np.datetime64(self.start, "m")
        return origin + np.asarray(tick, dtype=np.int64) * np.timedelta64(self.tick_hours * 60,
                                                                             "m")

    def describe(self) -> str:
        """Return the assignment in words: unit, treated units and periods, dates."""
        schedule = self.schedule
        treated, cells = int(schedule.is_treated.sum()), schedule.is_treated.size
        what = (f"{treated} of {schedule.n_units} units treated" if schedule.is_static else
                f"{treated} of {cells} unit-periods treated ({schedule.n_units} unit(s) x "
                f"{schedule.n_periods} periods)")
        return (f"randomized by {kind_of(self.spec).describe_unit(self.spec)}, {what}, "
                f"{self.days} days from {self.start.date()}")

    def estimator_name(self) -> str:
        """Return the full name of the estimator the design's kind analyses it with."""
        return kind_of(self.spec).estimator_name(self.spec)


def _ids(values: np.ndarray) -> np.ndarray:
    return np.array([str(v) for v in np.asarray(values).tolist()], dtype=object)


def assign_design(scenario: Scenario, design: str | DesignSpec, *, seed: int | None = None,
                  start: str | datetime | None = None, market=None) -> Assignment:
    """Draw the real experiment's assignment of one of the scenario's designs.

    The draw is the design kind's own (:meth:`DesignKind.draw`) on the stream
    ``(seed, replication 0, assignment, CRC-32 of the label)``: the same
    assignment as replication 0 of ``spillgauge run --seed seed``, on any machine.

    Parameters
    ----------
    scenario : Scenario
    design : str or DesignSpec
        A design label of the scenario (or a spec).
    seed : int, optional
        Defaults to ``scenario.study.seed``.
    start : str or datetime, optional
        Midnight at which the experiment starts (:func:`parse_start`).
    market : Market, optional
        The scenario's market for this seed (built when not given).

    Raises
    ------
    ScenarioError
        For an unknown label, a launch (not randomized), a seed out of range or a
        start that is not a midnight.
    """
    from spillgauge.market.build import build_market
    from spillgauge.study.store import scenario_fingerprint
    from spillgauge.worlds.outcome import pre_period_outcome

    if isinstance(design, str):
        labels = [d.label for d in scenario.designs]
        if design not in labels:
            raise ScenarioError("--design", "a design label of the scenario (one of "
                                + ", ".join(labels) + ")", design)
        spec = scenario.design(design)
    else:
        spec = design
    seed = scenario.study.seed if seed is None else seed
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or \
            not 0 <= int(seed) < 2**63:
        raise ScenarioError("--seed", "an int in [0, 2**63)", seed)
    seed = int(seed)
    begin = parse_start(start)
    kind = kind_of(spec)
    if not kind.is_randomized:
        raise ScenarioError("--design", "a randomized design (a launch such as "
                            f"{spec.kind!r} is not assigned: users or regions choose)",
                            spec.label)
    kind.check(spec, scenario)
    market = build_market(scenario, seed) if market is None else market
    kind.prepare(market, spec)
    rng = np.random.default_rng(stream(seed, ASSIGNMENT_REPLICATION, ASSIGNMENT,
                                       design_key(spec.label)))
    schedule = kind.draw(market, spec, rng=rng)
    population = market.population
    return Assignment(spec=spec, schedule=schedule, seed=seed, start=begin,
                      tick_hours=scenario.calendar.tick_hours, days=scenario.calendar.days,
                      confidence=1.0 - scenario.study.alpha, user_ids=_ids(population.user_ids),
                      pool_ids=_ids(population.pool_ids),
                      pool_of_user=np.asarray(population.pool_of_user, dtype=np.int64),
                      history=np.asarray(population.history, dtype=float),
                      scenario_name=scenario.name,
                      fingerprint=market_fingerprint(scenario_fingerprint(scenario, seed)),
                      outcome=scenario.study.outcome,
                      pre_outcome=(pre_period_outcome("revenue", population.history,
                                                      population.basket_value)
                                   if scenario.study.outcome == "revenue" else None))
