"""The sweep: run the same study over a grid of one or two scenario values.

A sweep asks where a design stops being trustworthy: the stock cover below
which user-level randomization overstates the effect, the block length that
minimises a switchback's RMSE, the peer lift past which graph clusters win.
Each grid point is a full study (:func:`~spillgauge.study.run.run_study`)
of the scenario with the swept keys set by :func:`with_value`.

Every point runs from the same study seed: common random numbers across
points. The users, their rates and (where the scenario's highest demand rate
is unchanged, e.g. over ``pools.stock_cover``) the candidate order events are
the same at every point, so curves along a swept key are smoother than
independent runs would give; the Monte Carlo errors of neighbouring points are
correlated, so a difference between two points is not judged by their two SEs
as if they were independent.
"""

from __future__ import annotations

import csv
import dataclasses
import itertools
import math
import typing
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from spillgauge.designs.registry import KINDS, make_design_spec
from spillgauge.errors import ScenarioError
from spillgauge.files import dumps, folder_lock, write_atomic
from spillgauge.scenario import Scenario
from spillgauge.scenario.config import SECTIONS
from spillgauge.scenario.reading import scenario_to_dict, validate_scenario
from spillgauge.statistics.trust import assess_trust, few_replications_note
from spillgauge.study.compose import describe_unit, estimator_name
from spillgauge.study.result import StudyResult
from spillgauge.study.run import run_study
from spillgauge.sweep.answers import (
    answer_one_axis,
    answer_two_axes,
    split_key,
)

__all__ = ["SweepAxis", "SweepResult", "parse_vary", "with_value", "valid_keys", "run_sweep",
           "write_sweep"]

_SECTIONS = SECTIONS
_MAX_POINTS = 100  # values along one key: more is a typo, not a study
_NOT_SWEPT = {"study.reps", "study.seed"}  # arguments of the sweep itself
# the numeric keys the design kinds declare, by name
_DESIGN_FIELDS = {key.name: key.type for kind in KINDS.values() for key in kind.keys
                  if key.is_numeric}
_GRAPH_USES = {"small_world": {"mean_degree", "rewire_share"},
               "pool_blocks": {"mean_degree", "within_pool_share"},
               "communities": {"mean_degree", "community_count", "within_community_share"}}
_SYNTAX = "KEY=START:STOP:N (N evenly spaced values) or KEY=V1,V2,... with distinct values"


@dataclass(frozen=True, slots=True)
class SweepAxis:
    """One swept key and its values.

    Parameters
    ----------
    key : str
        Dotted scenario key, e.g. ``"pools.stock_cover"`` or ``"design.sb.block_hours"``.
    values : tuple of float or int
        Distinct values, in the order given (ints for integer keys).
    """

    key: str
    values: tuple

    @property
    def is_integer(self) -> bool:
        """Whether the key holds an integer (its values are ints)."""
        return _field_type(self.key) is int


def _field_type(key: str) -> type | None:
    """Return int or float for a numeric key's field (by name alone), else None."""
    parts = split_key(key)
    if len(parts) == 2 and parts[0] in _SECTIONS and key not in _NOT_SWEPT:
        hint = typing.get_type_hints(_SECTIONS[parts[0]]).get(parts[1])
    elif len(parts) == 3 and parts[1] and parts[2] in _DESIGN_FIELDS:
        hint = _DESIGN_FIELDS[parts[2]]
    else:
        return None
    return hint if hint in (int, float) else None


def valid_keys(scenario: Scenario | None = None) -> list[str]:
    """Return the numeric keys a sweep can vary (design keys need the scenario's labels).

    >>> "pools.stock_cover" in valid_keys()
    True
    """
    keys = [f"{name}.{f}" for name, cls in _SECTIONS.items()
            for f, tp in typing.get_type_hints(cls).items()
            if tp in (int, float) and f"{name}.{f}" not in _NOT_SWEPT]
    if scenario is None:
        return keys + [f"design.<label>.{f}" for f in _DESIGN_FIELDS]
    for spec in scenario.designs:
        keys += [f"design.{spec.label}.{f}" for f in spec.params if f in _DESIGN_FIELDS]
    return keys


def _number(text: str, whole: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise ScenarioError("--vary", _SYNTAX, whole) from None
    if not math.isfinite(value):
        raise ScenarioError("--vary", _SYNTAX + " (finite numbers)", whole)
    return value


def parse_vary(text: str) -> SweepAxis:
    """Parse a ``--vary`` option: ``KEY=START:STOP:N`` or ``KEY=V1,V2,...``.

    ``START:STOP:N`` gives ``N`` evenly spaced values from START to STOP inclusive
    (as :func:`numpy.linspace`); ``N = 1`` gives START alone. Values of an
    integer key (``calendar.days``, ``design.<label>.block_hours``, ...) are
    rounded to ints, and must stay distinct.

    Raises
    ------
    ScenarioError
        With ``field == "--vary"`` for bad syntax, an unknown or non-numeric key,
        repeated values or ``N < 1``.

    Examples
    --------
    >>> parse_vary("pools.stock_cover=0.8:1.6:5").values
    (0.8, 1.0, 1.2, 1.4, 1.6)
    >>> parse_vary("design.sb.block_hours=6,12,24").values
    (6, 12, 24)
    """
    if not isinstance(text, str) or text.count("=") != 1:
        raise ScenarioError("--vary", _SYNTAX, text)
    key, spec = (part.strip() for part in text.split("="))
    kind = _field_type(key)
    if kind is None:
        import difflib

        close = difflib.get_close_matches(key, valid_keys(), n=1)
        hint = f"; did you mean {close[0]}?" if close else ""
        raise ScenarioError("--vary", "KEY=... with KEY a numeric scenario key, such as "
                            "pools.stock_cover or design.<label>.block_hours (every number "
                            f"key of docs/scenario.md{hint})", text)
    if not spec:
        raise ScenarioError("--vary", _SYNTAX, text)
    if ":" in spec:
        parts = spec.split(":")
        if len(parts) != 3:
            raise ScenarioError("--vary", _SYNTAX, text)
        start, stop = _number(parts[0], text), _number(parts[1], text)
        count = _number(parts[2], text)
        if count != int(count) or not 1 <= count <= _MAX_POINTS:
            raise ScenarioError("--vary", _SYNTAX + f" with N an int in [1, {_MAX_POINTS}]", text)
        raw = [start] if count == 1 else np.linspace(start, stop, int(count)).tolist()
    else:
        raw = [_number(part, text) for part in spec.split(",")]
        if len(raw) > _MAX_POINTS:
            raise ScenarioError("--vary", f"at most {_MAX_POINTS} values", text)
    if kind is int:
        values = tuple(int(math.floor(v + 0.5)) for v in raw)
    else:
        values = tuple(float(f"{v:.12g}") for v in raw)
    if len(set(values)) != len(values):
        what = " after rounding to whole numbers" if kind is int else ""
        raise ScenarioError("--vary", f"distinct values{what} ({_SYNTAX})", text)
    return SweepAxis(key=key, values=values)


def _csv_has_column(path: str | None, column: str) -> bool:
    if path is None:
        return False
    with open(path, newline="", encoding="utf-8") as handle:
        header = next(csv.reader(handle), [])
    return column in (h.strip() for h in header)


def _ignored_reason(scenario: Scenario, section: str, name: str) -> str | None:
    """Return why a section key would change nothing in this scenario, or None."""
    users, pools, graph = scenario.users, scenario.pools, scenario.graph
    if section == "users" and name in ("count", "orders_per_week", "rate_shape") and users.file:
        return "users.file is given (the file sets it)"
    if section == "pools" and name == "count" and (users.file or pools.file):
        return "a users or pools file is given (the file sets the pools)"
    if section == "users" and name == "history_days" and _csv_has_column(users.file,
                                                                        "history_orders"):
        return "users.file has a history_orders column"
    if section == "pools" and name == "stock_cover" and _csv_has_column(pools.file,
                                                                       "order_up_to"):
        return "pools.file has an order_up_to column"
    if section == "graph" and name not in _GRAPH_USES.get(graph.model, set()):
        return f"graph.model is {graph.model!r}, which does not use it"
    if section == "effect" and name == "peer_lift" and graph.model == "none":
        return "graph.model is 'none' (no neighbours to be lifted by)"
    return None


def with_value(scenario: Scenario, key: str, value: float) -> Scenario:
    """Return the scenario with one numeric key set (validation runs again).

    Parameters
    ----------
    scenario : Scenario
    key : str
        ``"<section>.<key>"`` (e.g. ``"pools.stock_cover"``, ``"users.count"``) or
        ``"design.<label>.<key>"`` for ``share``, ``resolution``, ``block_hours``
        or ``burn_in_hours``. A design keeps its label when its parameters change.
    value : float or int
        Integer keys need a whole number.

    Raises
    ------
    ScenarioError
        For an unknown key (the message lists the valid ones), a non-numeric key,
        a key the scenario does not use (e.g. ``users.count`` with a users file),
        or a value the scenario rejects (``.field`` names it).

    Examples
    --------
    >>> from spillgauge.scenario.reading import parse_scenario
    >>> s = parse_scenario({"name": "tiny", "users": {"count": 50}, "pools": {"count": 2}})
    >>> with_value(s, "pools.stock_cover", 0.9).pools.stock_cover
    0.9
    >>> t = with_value(s, "design.switchback-24h.block_hours", 12)
    >>> t.design("switchback-24h").block_hours
    12
    """
    parts = split_key(key)
    known = valid_keys(scenario)
    if parts and parts[0] == "design":
        labels = [d.label for d in scenario.designs]
        if parts[1] not in labels:
            raise ScenarioError(key, "a design label of the scenario (one of "
                                + ", ".join(labels) + ")", parts[1])
        spec = scenario.design(parts[1])
        if parts[2] not in spec.params or parts[2] not in _DESIGN_FIELDS:
            raise ScenarioError(key, f"a numeric key of a {spec.kind} design (one of "
                                + ", ".join(k for k in known if k.startswith(
                                    f"design.{spec.label}.")) + ")", parts[2])
        new = make_design_spec(spec.kind, {**spec.params,
                                           parts[2]: _typed(value, _field_type(key), key)},
                               label=spec.label, index=spec.index)
        designs = tuple(new if d is spec else d for d in scenario.designs)
        return validate_scenario(dataclasses.replace(scenario, designs=designs))
    if len(parts) != 2 or parts[0] not in _SECTIONS or parts[1] not in typing.get_type_hints(
            _SECTIONS[parts[0]]):
        raise ScenarioError(key, "a numeric scenario key (one of " + ", ".join(known) + ")",
                            key)
    kind = _field_type(key)
    if kind is None:
        what = ("set by the sweep's own reps and seed arguments, not swept" if key in _NOT_SWEPT
                else "a numeric key to sweep (one of " + ", ".join(known) + ")")
        raise ScenarioError(key, what, getattr(getattr(scenario, parts[0]), parts[1]))
    reason = _ignored_reason(scenario, *parts)
    if reason is not None:
        raise ScenarioError(key, f"a key the scenario uses ({reason})", value)
    section = getattr(scenario, parts[0])
    section = dataclasses.replace(section, **{parts[1]: _typed(value, kind, key)})
    return validate_scenario(dataclasses.replace(scenario, **{parts[0]: section}))


def _typed(value: object, kind: type, key: str) -> int | float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise ScenarioError(key, "a number", value)
    if not math.isfinite(float(value)):
        raise ScenarioError(key, "a finite number", value)
    if kind is int:
        if float(value) != round(float(value)):
            raise ScenarioError(key, "a whole number", value)
        return int(round(float(value)))
    return float(value)


@dataclass(frozen=True, slots=True, eq=False)
class SweepResult:
    """Every grid point's study of a sweep.

    Attributes
    ----------
    scenario : Scenario
        The scenario before any key was set.
    axes : list of SweepAxis
        One or two.
    points : list of dict
        Per grid point, the swept key -> value (first axis outermost).
    studies : list of StudyResult
        Per grid point, in the order of ``points``.
    seed, reps : int
        Shared by every point.
    """

    scenario: Scenario
    axes: list
    points: list
    studies: list
    seed: int = 0
    reps: int = 0

    def frame(self):
        """Return one row per point x design as a pandas DataFrame.

        Columns: ``point``, the swept keys, ``label``, ``kind``, ``estimator``,
        ``unit``, every :class:`~spillgauge.statistics.metrics.DesignMetrics` field
        (``bias``, ``bias_se``, ``rmse``, ``coverage``, ...), ``gte``, ``gte_se``,
        ``alpha``, ``recommended``, ``is_diagnostic`` (a test of interference: never
        trusted, never recommended) and ``trusted`` (from
        :func:`~spillgauge.statistics.trust.assess_trust`), and ``distrust``: which check
        failed (``"no_estimates"``, ``"coverage"``, ``"bias"``; ``"diagnostic"`` for a
        test of interference; empty when trusted).
        """
        import pandas as pd

        rows = []
        for index, (point, study) in enumerate(zip(self.points, self.studies)):
            alpha = study.scenario.study.alpha
            for spec in study.scenario.designs:
                m = study.metrics[spec.label]
                verdict = assess_trust(m, alpha=alpha)
                is_diagnostic = not KINDS[spec.kind].is_recommendable  # judged, never trusted
                rows.append({"point": index, **point, "label": spec.label, "kind": spec.kind,
                             "estimator": estimator_name(spec), "unit": describe_unit(spec),
                             **m.to_dict(), "gte": study.truth.gte, "gte_se": study.truth.gte_se,
                             "alpha": alpha,
                             "recommended": study.recommendation.label == spec.label,
                             "is_diagnostic": is_diagnostic,
                             "trusted": verdict.is_trusted and not is_diagnostic,
                             "distrust": "diagnostic" if is_diagnostic else verdict.problem or ""})
        return pd.DataFrame(rows)

    def answer(self) -> str:
        """Answer the sweep's question in numbers, in a few sentences.

        One axis: for each design, the swept values where it is trusted and where
        that stops; the recommended design along the axis; for a
        ``design.<label>.<key>`` axis, the value of lowest RMSE. Two axes: which
        design is recommended where on the grid.
        """
        rows = self.frame().to_dict("records")
        if len(self.axes) == 1:
            text = answer_one_axis(rows, self.axes[0].key)
        else:
            text = answer_two_axes(rows, self.axes[0].key, self.axes[1].key)
        note = few_replications_note(self.reps, self.scenario.study.alpha)
        return text + (f" {note}" if note else "")


def _grid(scenario: Scenario, axes: list[SweepAxis]) -> tuple[list[dict], list[Scenario]]:
    if not 1 <= len(axes) <= 2:
        raise ScenarioError("--vary", "given once or twice (one or two swept keys)", len(axes))
    if len(axes) == 2 and axes[0].key == axes[1].key:
        raise ScenarioError("--vary", "two different keys", axes[1].key)
    points, scenarios = [], []
    for values in itertools.product(*(axis.values for axis in axes)):
        point = {axis.key: value for axis, value in zip(axes, values)}
        current = scenario
        for key, value in point.items():
            current = with_value(current, key, value)
        points.append(point)
        scenarios.append(current)
    return points, scenarios


def run_sweep(scenario: Scenario, axes: list[SweepAxis], *, reps: int | None = None,
              seed: int | None = None, workers: int | None = 1, scheduler: str | None = None,
              out: str | Path | None = None, resume: bool = False,
              progress: Callable[[int, int], None] | None = None) -> SweepResult:
    """Run one study per grid point of one or two swept keys.

    Parameters
    ----------
    scenario : Scenario
    axes : list of SweepAxis
        One or two axes (see :func:`parse_vary`); the grid is their product, the
        first axis outermost. Every point is validated before any runs.
    reps, seed : int, optional
        Override ``study.reps`` and ``study.seed``; every point uses the same seed
        (common random numbers across points).
    workers, scheduler
        As for :func:`~spillgauge.study.run.run_study`.
    out : path, optional
        Results folder: point ``i``'s study goes to ``out/points/<i>/`` as it runs,
        and ``sweep.csv`` and ``sweep.json`` are written at the end.
    resume : bool
        Continue every point from the replications saved under ``out``.
    progress : callable, optional
        Called as ``progress(done, total)`` over all points' replications.

    Returns
    -------
    SweepResult
    """
    grid = _grid(scenario, list(axes))  # every point is valid before the folder is made
    if out is not None:
        with folder_lock(out):  # a second sweep into the same folder is refused by name
            return _run_sweep(scenario, axes, grid, reps, seed, workers, scheduler, out,
                              resume, progress)
    return _run_sweep(scenario, axes, grid, reps, seed, workers, scheduler, out, resume,
                      progress)


def _run_sweep(scenario, axes, grid, reps, seed, workers, scheduler, out, resume, progress
               ) -> SweepResult:
    points, scenarios = grid
    reps = scenario.study.reps if reps is None else int(reps)
    seed = scenario.study.seed if seed is None else int(seed)
    total = reps * len(points)
    studies: list[StudyResult] = []
    for index, point_scenario in enumerate(scenarios):
        offset = index * reps
        report = (lambda done, _n, offset=offset: progress(offset + done, total)) \
            if progress else None
        folder = Path(out) / "points" / str(index) if out is not None else None
        studies.append(run_study(point_scenario, reps=reps, seed=seed, workers=workers,
                                 scheduler=scheduler, out=folder, resume=resume,
                                 progress=report))
    result = SweepResult(scenario=scenario, axes=list(axes), points=points, studies=studies,
                         seed=seed, reps=reps)
    if out is not None:
        write_sweep(result, out)
    return result


def write_sweep(sweep: SweepResult, out: str | Path) -> list[Path]:
    """Write ``sweep.csv`` (one row per point x design) and ``sweep.json``, atomically.

    ``sweep.json`` holds the axes, the points with each one's recommendation and
    results folder, the answer sentence and the base scenario's settings.
    """
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    write_atomic(out / "sweep.csv", sweep.frame().to_csv(index=False))
    points = [{"point": i, "values": point, "folder": f"points/{i}",
               "recommended": study.recommendation.label,
               "is_trustworthy": study.recommendation.is_trustworthy,
               "gte": study.truth.gte, "gte_se": study.truth.gte_se}
              for i, (point, study) in enumerate(zip(sweep.points, sweep.studies))]
    data = {"scenario": sweep.scenario.name, "seed": sweep.seed, "reps": sweep.reps,
            "axes": [{"key": a.key, "values": list(a.values)} for a in sweep.axes],
            "answer": sweep.answer(), "points": points,
            "scenario_settings": scenario_to_dict(sweep.scenario)}
    write_atomic(out / "sweep.json", dumps(data))
    return [out / "sweep.csv", out / "sweep.json"]
