"""The results folder: append-only replication log, atomic final files, resume."""

from __future__ import annotations

import json
import os
from pathlib import Path

from spillgauge.errors import ResultsError, ScenarioError
from spillgauge.files import dumps, write_atomic
from spillgauge.scenario import Scenario
from spillgauge.scenario.reading import scenario_to_dict
from spillgauge.study.replication import (
    ReplicationResult,
    result_from_record,
    result_to_record,
)

__all__ = ["ResultsFolder", "load_study", "FORMAT_VERSION", "scenario_fingerprint", "study_id"]

FORMAT_VERSION = 1
_STUDY = "study.json"
_LOG = "replications.jsonl"


def _data_file_digests(scenario: Scenario) -> dict:
    """Return the SHA-256 of each data file the scenario reads, by its dotted key.

    A resumed study must see the same data, not only the same paths.
    """
    import hashlib

    digests = {}
    for key, path in (("users.file", scenario.users.file), ("pools.file", scenario.pools.file),
                      ("graph.file", scenario.graph.file)):
        if path is not None:
            with open(path, "rb") as handle:
                digests[key] = hashlib.sha256(handle.read()).hexdigest()
    return digests


def scenario_fingerprint(scenario: Scenario, seed: int) -> dict:
    """Return what identifies a study: the scenario's settings (not ``study.reps``), seed and data.

    ``study.json`` holds it; an assignment folder keeps it to name the scenario it
    was drawn for. Data files are identified by their SHA-256, not their paths.
    """
    settings = scenario_to_dict(scenario)
    settings["study"] = {k: v for k, v in settings["study"].items() if k != "reps"}
    return {"format": FORMAT_VERSION, "scenario": scenario.name, "seed": int(seed),
            "settings": settings, "data_files": _data_file_digests(scenario)}


def _first_difference(a: object, b: object, prefix: str = "") -> str:
    """Return the dotted key of the first place where two JSON values differ."""
    if isinstance(a, dict) and isinstance(b, dict):
        for key in list(a) + [k for k in b if k not in a]:
            if a.get(key) != b.get(key):
                return _first_difference(a.get(key), b.get(key), f"{prefix}{key}.")
    if isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
        for i, (x, y) in enumerate(zip(a, b)):
            if x != y:
                return _first_difference(x, y, f"{prefix[:-1]}[{i}].")
    return prefix[:-1] or "the settings"


def study_id(fingerprint: dict) -> str:
    """Return a short digest of a study fingerprint (as ``study.json`` holds it).

    Every saved replication record carries it, so a record of another study is
    recognised even when ``study.json`` was replaced.
    """
    import hashlib

    canonical = json.dumps(json.loads(dumps(fingerprint)), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(canonical.encode("utf-8")).hexdigest()[:16]


def _latest(records, log: Path | None = None, labels: set | None = None,
            study: str | None = None, decode=result_from_record) -> list[ReplicationResult]:
    """Rebuild saved replications, one per index, sorted.

    ``records`` yields ``(line number, record)``. A record is refused by its
    line when it is not a replication of this study: its design labels are not
    ``labels``, it carries another study's digest than ``study``, its index is
    not below the replications its run asked for, or it repeats an index.
    Records written before records carried the digest are read when
    ``study.json`` matches. ``decode`` rebuilds a result from its record.
    """
    where = log or _LOG
    results, first_line = {}, {}
    for number, record in records:
        try:
            result = decode(record)
            is_ours = result.replication >= 0 and (labels is None or set(result.runs) == labels)
            saved_study, saved_reps = record.get("study"), record.get("reps")
        except (KeyError, TypeError, ValueError, AttributeError):
            is_ours = False
        if not is_ours:
            raise ResultsError(f"{where} line {number} is not a replication record of "
                               "this study; delete that line (or the folder) and rerun")
        if study is not None and saved_study is not None and saved_study != study:
            raise ResultsError(f"{where} line {number} belongs to another study (fingerprint "
                               f"{str(saved_study)[:16]!r}, study.json gives {study!r}); "
                               "delete that line (or the folder) and rerun")
        if saved_reps is not None and not (isinstance(saved_reps, int)
                                           and result.replication < saved_reps):
            raise ResultsError(f"{where} line {number} holds replication {result.replication}, "
                               f"beyond the {saved_reps} its run asked for; delete that line "
                               "(or the folder) and rerun")
        if result.replication in results:
            raise ResultsError(f"{where} line {number} repeats replication "
                               f"{result.replication} (first on line "
                               f"{first_line[result.replication]}); delete that line (or the "
                               "folder) and rerun")
        results[result.replication] = result
        first_line[result.replication] = number
    return [results[k] for k in sorted(results)]


class ResultsFolder:
    """A study's results folder.

    ``study.json`` fingerprints the study (scenario settings except the number
    of replications, and the seed); a folder holding another study is refused,
    never overwritten. A subclass may keep other results the same way (a plan's
    replications) by naming its files and coding its records.
    """

    study_file: str = _STUDY  # the fingerprint
    log_file: str = _LOG  # the append-only log, one record per finished replication
    final_file: str = "summary.json"  # written at the end: its presence means results

    def __init__(self, path: str | Path, scenario: Scenario, seed: int) -> None:
        self.path = Path(path)
        self.fingerprint = self.make_fingerprint(scenario, seed)
        self.study_id = study_id(self.fingerprint)
        self._reps = int(scenario.study.reps)
        self._labels = {spec.label for spec in scenario.designs}

    def make_fingerprint(self, scenario: Scenario, seed: int) -> dict:
        """Return what identifies the results (:func:`scenario_fingerprint`)."""
        return scenario_fingerprint(scenario, seed)

    def encode(self, result) -> dict:
        """Return a finished replication as a record of the log."""
        return result_to_record(result)

    def decode(self, record: dict):
        """Rebuild a finished replication from its record."""
        return result_from_record(record)

    @property
    def log_path(self) -> Path:
        """The append-only replication log."""
        return self.path / self.log_file

    def _check_owner(self) -> bool:
        study = self.path / self.study_file
        if not study.exists():
            if (self.path / self.final_file).exists() or self._log_has_lines():
                raise ResultsError(f"{self.path} holds results without a {self.study_file}; "
                                   "choose another --out folder")
            return False
        try:
            saved = json.loads(study.read_text(encoding="utf-8"))
        except (OSError, json.JSONDecodeError) as exc:
            raise ResultsError(f"{study} cannot be read ({exc}); choose another --out folder") \
                from None
        mine = json.loads(dumps(self.fingerprint))
        if not isinstance(saved, dict):
            raise ResultsError(f"{study} is not a study fingerprint; choose another --out folder")
        if saved != mine:
            if (saved.get("scenario"), saved.get("seed")) != (mine["scenario"], mine["seed"]):
                what = (f"scenario {saved.get('scenario')!r} with seed {saved.get('seed')}, "
                        f"not scenario {mine['scenario']!r} with seed {mine['seed']}")
            else:
                key = _first_difference({k: v for k, v in saved.items()
                                         if k not in ("scenario", "seed")},
                                        {k: v for k, v in mine.items()
                                         if k not in ("scenario", "seed")})
                key = key.removeprefix("settings.")
                what = f"scenario {mine['scenario']!r} with other settings ({key} differs)"
            raise ResultsError(f"{self.path} holds a study of {what}; choose another --out "
                               "folder or delete it")
        return True

    def open(self, *, resume: bool) -> list[ReplicationResult]:
        """Prepare the folder; return the replications already saved when resuming."""
        self.path.mkdir(parents=True, exist_ok=True)
        ours = self._check_owner()
        if not ours:
            write_atomic(self.path / self.study_file, dumps(self.fingerprint))
        if not resume or not self.log_path.exists():
            write_atomic(self.log_path, "")
            return []
        lines = list(self._valid_lines())
        records = _latest(((n, record) for n, _, record in lines), self.log_path, self._labels,
                          self.study_id, self.decode)
        # Rewrite the log without a torn last line, so new lines append cleanly.
        write_atomic(self.log_path, "".join(line + "\n" for _, line, _ in lines))
        return records

    def _log_has_lines(self) -> bool:
        try:
            return self.log_path.stat().st_size > 0
        except OSError:
            return False

    def _valid_lines(self):
        """Yield ``(number, line, record)`` for every complete line of the log (a torn one is
        skipped)."""
        if not self.log_path.exists():
            return
        with open(self.log_path, encoding="utf-8", errors="replace") as stream:
            for number, line in enumerate(stream, start=1):
                line = line.rstrip("\n")
                try:
                    yield number, line, json.loads(line)
                except (json.JSONDecodeError, RecursionError):
                    continue

    def read(self) -> list[ReplicationResult]:
        """Return the saved replications (a torn last line from a kill is skipped)."""
        return _latest(((n, record) for n, _, record in self._valid_lines()), self.log_path,
                       self._labels, self.study_id, self.decode)

    def append(self, result: ReplicationResult) -> None:
        """Append one finished replication, flushed and fsynced."""
        record = {**self.encode(result), "study": self.study_id, "reps": self._reps}
        line = dumps(record, compact=True)
        with open(self.log_path, "a", encoding="utf-8") as stream:
            stream.write(line + "\n")
            stream.flush()
            os.fsync(stream.fileno())

    def finish(self, study) -> None:
        """Write ``summary.json`` and ``replications.csv`` atomically."""
        write_atomic(self.path / "summary.json", dumps(study.summary()))
        write_atomic(self.path / "replications.csv",
                     study.replications_frame().to_csv(index=False))


def load_study(path: str | Path):
    """Rebuild a finished (or interrupted) study from its results folder, without simulating.

    Raises
    ------
    ResultsError
        When the folder holds no study or no finished replication.
    """
    from spillgauge.scenario.reading import parse_scenario
    from spillgauge.study.result import summarise_study

    path = Path(path)
    study_file = path / _STUDY
    if not study_file.is_file():
        raise ResultsError(f"{path} is not a results folder (no {_STUDY}); run "
                           "`spillgauge run SCENARIO --out DIR` first")
    try:
        saved = json.loads(study_file.read_text(encoding="utf-8"))
        scenario = parse_scenario(saved["settings"])
        seed = int(saved["seed"])
    except (OSError, json.JSONDecodeError, KeyError, TypeError, ValueError, RecursionError) as exc:
        if isinstance(exc, ScenarioError):
            raise ResultsError(f"{study_file} holds settings that are not a valid scenario "
                               f"({exc})") from None
        raise ResultsError(f"{study_file} cannot be read ({exc.__class__.__name__}: "
                           f"{str(exc)[:80]})") from None
    folder = ResultsFolder(path, scenario, seed)
    folder.study_id = study_id(saved)  # records name the study as saved, not as re-read
    results = folder.read()
    if not results:
        raise ResultsError(f"{path} holds no finished replication yet")
    market = {}
    summary_file = path / "summary.json"
    if summary_file.is_file():
        try:
            market = json.loads(summary_file.read_text(encoding="utf-8")).get("market", {})
        except (json.JSONDecodeError, UnicodeDecodeError, AttributeError):
            market = {}
    import dataclasses

    scenario = dataclasses.replace(scenario, study=dataclasses.replace(
        scenario.study, reps=len(results)))
    return summarise_study(scenario, seed, results, market)
