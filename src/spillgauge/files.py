"""Files: atomic writes, and JSON with NaN written as null (and read back as NaN).

Every file spillgauge writes goes through :func:`write_atomic` or
:func:`write_atomic_with` (a temporary file in the same folder, then a rename),
so an interrupted run never leaves half a file (a temporary file a kill left
behind starts with a dot, ends in ``.tmp`` and is removed by the next
:func:`folder_lock` of its folder). :func:`folder_lock` holds an OS lock on a
results folder for the length of a run, so two runs never write into one
folder at once. JSON is standard: NaN and
infinities become ``null`` (:func:`json_safe`), and :func:`nan_from_null` turns
them back into NaN when a saved record is read.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path

from spillgauge.errors import ResultsError

__all__ = ["write_atomic", "write_atomic_with", "json_safe", "dumps", "nan_from_null",
           "folder_lock", "LOCK_FILE"]

LOCK_FILE = ".spillgauge.lock"
_held: dict[str, list] = {}  # resolved folder -> [open lock file, depth] held by this process


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_atomic_with(path: str | Path, write) -> None:
    """Write a file atomically: ``write(stream)`` fills a temporary binary file, then a rename.

    The file gets the usual permissions (0666 minus the umask), not the
    owner-only mode of a temporary file.
    """
    path = Path(path)
    handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(handle, "wb") as stream:
            write(stream)
            stream.flush()
            os.fsync(stream.fileno())
        os.chmod(temporary, 0o666 & ~_umask())
        os.replace(temporary, path)
    except BaseException:
        if os.path.exists(temporary):
            os.unlink(temporary)
        raise


def write_atomic(path: str | Path, text: str) -> None:
    """Write a text file (UTF-8) atomically: a temporary file in the same folder, then a rename."""
    data = text.encode("utf-8")
    write_atomic_with(path, lambda stream: stream.write(data))


def _json_default(value):
    if hasattr(value, "item"):
        return value.item()
    if hasattr(value, "tolist"):
        return value.tolist()
    raise TypeError(f"cannot write {type(value).__name__} as JSON")


def json_safe(data: object) -> object:
    """Return ``data`` with NaN and infinities replaced by None (tuples become lists)."""
    if isinstance(data, float) and not math.isfinite(data):
        return None
    if isinstance(data, dict):
        return {k: json_safe(v) for k, v in data.items()}
    if isinstance(data, (list, tuple)):
        return [json_safe(v) for v in data]
    return data


def dumps(data: object, *, compact: bool = False) -> str:
    """Return standard JSON (NaN written as null): indented, or on one line when ``compact``."""
    if compact:
        return json.dumps(json_safe(data), default=_json_default, allow_nan=False,
                          separators=(",", ":"))
    return json.dumps(json_safe(data), default=_json_default, indent=2, allow_nan=False)


def nan_from_null(value: object) -> object:
    """Return NaN for ``None`` and the value otherwise (the inverse of :func:`json_safe`).

    >>> nan_from_null(None), nan_from_null(2.0)
    (nan, 2.0)
    """
    return float("nan") if value is None else value


def _remove_stale_temporaries(folder: Path) -> None:
    """Remove temporary files a killed write left in ``folder`` (only this module's names)."""
    for path in folder.glob(".*.tmp"):
        try:
            path.unlink()
        except OSError:
            pass


@contextmanager
def folder_lock(folder: str | Path):
    """Hold an exclusive OS lock on ``folder`` (a lock file inside it) for the ``with`` block.

    A second process asking for the same folder is refused at once with a
    :class:`~spillgauge.errors.ResultsError` naming the holder (pid and start
    time). The lock is re-entrant within one process and is released by the OS
    when the holder dies, however it dies. Where ``fcntl`` does not exist the
    block runs unlocked.
    """
    folder = Path(folder)
    key = str(folder.resolve())
    if key in _held:
        _held[key][1] += 1
        try:
            yield
        finally:
            _held[key][1] -= 1
        return
    try:
        import fcntl
    except ImportError:  # pragma: no cover - platforms without fcntl (Windows)
        yield
        return
    folder.mkdir(parents=True, exist_ok=True)
    # The lock file is never deleted: deleting it would let two runs lock two inodes.
    stream = open(folder / LOCK_FILE, "a+", encoding="utf-8")  # noqa: SIM115 - held across yield
    try:
        fcntl.flock(stream.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        stream.seek(0)
        holder = stream.read(200).strip() or "another process"
        stream.close()
        raise ResultsError(f"{folder} is in use by another spillgauge run ({holder}); wait "
                           "for it to finish or choose another --out folder") from None
    try:
        stream.seek(0)
        stream.truncate()
        started = time.strftime("%Y-%m-%d %H:%M:%S UTC", time.gmtime())
        stream.write(f"pid {os.getpid()}, started {started}\n")
        stream.flush()
        _remove_stale_temporaries(folder)
        _held[key] = [stream, 1]
        yield
    finally:
        _held.pop(key, None)
        try:
            stream.truncate(0)
        except OSError:
            pass
        stream.close()  # closing the file releases the lock
