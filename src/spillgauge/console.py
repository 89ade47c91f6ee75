"""What a command shows on the console: option types, the progress bar, one-line failures.

Every failure a user meets is one line on stderr with an exit code (2 for a bad
input, 130 for Ctrl-C); option values are checked as they are parsed, naming
the option. Used by :mod:`spillgauge.cli` only.
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from spillgauge.errors import ScenarioError

__all__ = ["REPS", "SEED", "WORKERS", "whole_number", "ProgressBar", "out_folder",
           "new_file_place", "interrupted", "fail"]

_TICK = 0.2  # seconds between progress-bar redraws
_SEED_LIMIT = 2**63  # study.seed's range, [0, 2**63)


def whole_number(minimum: int, maximum: int | None = None, what: str = ""):
    """Return an argparse type: a whole number in [minimum, maximum], refused by name."""
    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"must be a whole number; got {text[:40]!r}") \
                from None
        if value < minimum or (maximum is not None and value > maximum):
            allowed = what or (f">= {minimum}" if maximum is None else
                               f"in [{minimum}, {maximum}]")
            raise argparse.ArgumentTypeError(f"must be {allowed}; got {value}")
        return value
    parse.__name__ = "int"
    return parse


class ProgressBar:
    """Replications done and time left (tqdm) on stderr: on a terminal, or when forced."""

    def __init__(self, label: str, *, enabled: bool, forced: bool = False) -> None:
        self.label = label
        self.enabled = forced or (enabled and sys.stderr.isatty())
        self.bar = None

    def __call__(self, done: int, total: int) -> None:
        if not self.enabled:
            return
        if self.bar is None:
            from tqdm import tqdm

            self.bar = tqdm(total=total, initial=done, desc=self.label, unit="rep",
                            file=sys.stderr, mininterval=_TICK, dynamic_ncols=True)
        self.bar.update(done - self.bar.n)
        if done >= total:
            self.close()

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None


REPS = whole_number(1, 1_000_000, "a whole number in [1, 1000000]")
SEED = whole_number(0, _SEED_LIMIT - 1, "a whole number in [0, 2**63)")
WORKERS = whole_number(1, 1024, "a whole number of processes in [1, 1024]")


def out_folder(given: str | None, default: Path) -> Path:
    """Return the results folder, refusing by name one that cannot be a writable folder."""
    out = Path(given) if given else default
    option = "--out" if given else "the results folder"
    if out.exists() and not out.is_dir():
        raise ScenarioError(option, "a folder (this is a file)", str(out))
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ScenarioError(option, f"a folder that can be created ({exc.strerror})",
                            str(out)) from None
    if not os.access(out, os.W_OK | os.X_OK):
        raise ScenarioError(option, "a folder you can write to", str(out))
    return out


# Folders of the operating system: `spillgauge new` never writes a file into them, even
# when asked to write outside the current folder (/var/tmp is a scratch folder, allowed).
SYSTEM_FOLDERS = ("/bin", "/boot", "/dev", "/etc", "/lib", "/lib32", "/lib64", "/libx32",
                  "/proc", "/run", "/sbin", "/sys", "/usr", "/var")
_SCRATCH = ("/var/tmp",)


def _is_within(path: Path, folder: str | Path) -> bool:
    return path == Path(folder) or Path(folder) in path.parents


def new_file_place(path: Path, *, allow_outside: bool) -> Path:
    """Return where ``spillgauge new`` may write ``path``, refusing by name where it may not.

    The file, with ``..`` and symbolic links resolved (a link named NAME.toml
    counts where it points), must lie in the current folder or below it, unless
    ``allow_outside``; and never in a folder of the operating system
    (:data:`SYSTEM_FOLDERS`), which a command run as root could otherwise
    overwrite.

    >>> new_file_place(Path("/etc/x.toml"), allow_outside=True)
    Traceback (most recent call last):
    ...
    spillgauge.errors.ScenarioError: NAME must be a file outside the system folder /etc; got '/etc/x.toml'
    """
    target = (Path.cwd() / path).resolve()
    for folder in SYSTEM_FOLDERS:
        if _is_within(target, folder) and not any(_is_within(target, s) for s in _SCRATCH):
            raise ScenarioError("NAME", f"a file outside the system folder {folder}",
                                str(target))
    if not allow_outside and not _is_within(target, Path.cwd().resolve()):
        raise ScenarioError("NAME", "a file in the current folder or below it (give "
                            "--allow-outside to write elsewhere)", str(target))
    return path


def interrupted(out: Path | None) -> int:
    """Report Ctrl-C in one line (after a progress bar, on its own line); return 130."""
    saved = (f"; finished replications are saved in {out}/: run the same command with "
             "--resume to continue") if out is not None and out.is_dir() else ""
    try:
        sys.stderr.write(("\n" if sys.stderr.isatty() else "") + f"spillgauge: interrupted{saved}\n")
    except (OSError, ValueError):
        pass
    return 130


def fail(message: str, code: int) -> int:
    try:
        sys.stderr.write(f"spillgauge: error: {message}\n")
    except (OSError, ValueError):
        pass
    return code
