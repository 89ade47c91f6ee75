"""Refusing a CSV value by file, line, column and value (the header is line 1)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from spillgauge.errors import ScenarioError

__all__ = ["file_error", "refuse_first", "column_codes", "column_floats"]


def column_floats(column: pd.Series) -> np.ndarray:
    """Return a text column as floats, each parsed exactly as Python reads it (NaN if not a number).

    A float written in full (``repr``) reads back to the same bits.

    >>> column_floats(pd.Series(["0.1", "2", "lots"])).tolist()
    [0.1, 2.0, nan]
    """
    try:
        return column.to_numpy(dtype=str).astype(np.float64)
    except ValueError:
        text = column.to_numpy(dtype=str)
        numbers = pd.to_numeric(pd.Series(text), errors="coerce").to_numpy(float, copy=True)
        good = np.isfinite(numbers)
        numbers[good] = text[good].astype(np.float64)
        return numbers


def file_error(path: Path, line: int, column: str, expected: str, value: object
               ) -> ScenarioError:
    """Return the error naming a CSV file's line, column and value.

    >>> str(file_error(Path("orders.csv"), 5, "orders", "a whole number >= 0", "-1"))
    "orders.csv line 5 column orders must be a whole number >= 0; got '-1'"
    """
    return ScenarioError(f"{path} line {line} column {column}", expected, value)


def refuse_first(path: Path, frame: pd.DataFrame, bad: np.ndarray, column: str,
                 expected: str) -> None:
    """Raise :func:`file_error` for the first row where ``bad`` holds (data row i is line i + 2)."""
    if np.any(bad):
        row = int(np.argmax(bad))
        raise file_error(path, row + 2, column, expected, frame[column].iat[row])


def column_codes(path: Path, frame: pd.DataFrame, column: str, names, expected: str
                 ) -> np.ndarray:
    """Return the position of each row's value among ``names``; refuse the first unknown one."""
    codes = pd.Index(list(names)).get_indexer(frame[column])
    refuse_first(path, frame, codes < 0, column, expected)
    return codes.astype(np.int64)
