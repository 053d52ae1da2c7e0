"""A table's cells as read, the reading options, and the problems found in them, row by row.

Cell values become numbers here; a value that cannot be used becomes a :class:`RowIssue`
naming the line, the column and the reason.
"""
from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from astropy.time import Time

from massfit.errors import InputError
from massfit.read.columns import CHECKS, MAY_BE_EMPTY, check_correlation, check_positive
from massfit.read.observations import Rejection

_MAX_SHOWN = 40  # characters of an offending value quoted in a message


@dataclass(frozen=True)
class Options:
    """The reader options, checked once for all files."""

    time_format: str | None
    time_scale: str | None
    units: Mapping[str, Any]
    skip_bad_rows: bool
    primary: str


@dataclass(frozen=True)
class RowIssue:
    """Why one row of a file cannot be used."""

    file: str
    line: int
    column: str | None
    reason: str

    def error(self) -> InputError:
        return InputError(self.reason, file=self.file, line=self.line, column=self.column)

    def rejection(self) -> Rejection:
        reason = self.reason if self.column is None else f"column '{self.column}': {self.reason}"
        return Rejection(self.file, self.line, reason)


@dataclass
class Cells:
    """One file split into cells, before any value is checked.

    ``values`` holds, per column, one cell per readable row: a str, a number, or None for
    an empty or masked cell. ``lines`` gives each readable row's physical line.
    """

    file: str
    names: list
    values: dict
    lines: np.ndarray
    rows_read: int
    unreadable: list = field(default_factory=list)
    units: dict = field(default_factory=dict)
    meta: Mapping = field(default_factory=dict)
    native_time: Time | None = None


class Issues:
    """The first problem found in each row of one file."""

    def __init__(self, cells: Cells):
        self._cells = cells
        self._found: dict[int, tuple[str | None, str]] = {}

    def add(self, row: int, column: str | None, reason: str) -> None:
        self._found.setdefault(int(row), (column, reason))

    def good(self) -> np.ndarray:
        mask = np.ones(len(self._cells.lines), dtype=bool)
        mask[list(self._found)] = False
        return mask

    def listed(self) -> list[RowIssue]:
        cells = self._cells
        found = [RowIssue(cells.file, int(cells.lines[row]), column, reason)
                 for row, (column, reason) in self._found.items()]
        return sorted(cells.unreadable + found, key=lambda issue: issue.line)


def quoted(value: Any) -> str:
    if isinstance(value, np.generic):  # a cell of a column kept as an array
        value = value.item()
    text = repr(value)
    return text if len(text) <= _MAX_SHOWN else text[:_MAX_SHOWN - 3] + "..."


def cells_of_column(cells: Cells, name: str) -> list:
    try:
        return cells.values[name]
    except KeyError:
        raise InputError("is not a plain column of values (astropy read it as an object "
                         "column); write plain values", file=cells.file, column=name) from None


def is_empty_cell(cell: Any) -> bool:
    return cell is None or (isinstance(cell, str) and not cell.strip())


def read_texts(cells: Cells, issues: Issues, name: str, required: bool) -> np.ndarray:
    texts = []
    for row, cell in enumerate(cells_of_column(cells, name)):
        text = "" if is_empty_cell(cell) else str(cell).strip()
        if required and not text:
            issues.add(row, name, "is empty")
        texts.append(text)
    return np.array(texts, dtype=str)


def _number(cell: Any) -> tuple[float, str | None]:
    if is_empty_cell(cell):
        return math.nan, "is empty"
    try:
        value = float(cell.strip() if isinstance(cell, str) else cell)
    except (TypeError, ValueError, OverflowError):
        return math.nan, f"is not a number ({quoted(cell)})"
    if not math.isfinite(value):
        return value, f"is not a finite number ({quoted(cell)})"
    return value, None


def read_numbers(cells: Cells, issues: Issues, name: str, factor: float) -> np.ndarray:
    check = CHECKS.get(name, lambda value: None)
    column = cells_of_column(cells, name)
    out = np.full(len(cells.lines), np.nan)
    # Whole-column conversion first (big files: a Python loop per cell dominated the
    # read); only the cells it cannot vouch for go through the per-cell checks below,
    # which give the same values and name the problem.
    converted = _as_floats(column)
    if converted is None:
        rows = range(len(column))
    else:
        with np.errstate(invalid="ignore", over="ignore"):
            scaled = converted * factor
            suspect = ~np.isfinite(converted) | ~np.isfinite(scaled)
            suspect |= _SUSPECT.get(check, lambda values: False)(converted)
            suspect |= _out_of_range(scaled, check is check_positive)
        out = np.where(suspect, np.nan, scaled)
        rows = np.flatnonzero(suspect).tolist()
    for row in rows:
        cell = column[row]
        if name in MAY_BE_EMPTY and is_empty_cell(cell):
            continue
        value, reason = _number(cell)
        reason = reason or check(value)
        if reason is None:
            reason = _range_problem(value, factor, check is check_positive)
        if reason:
            issues.add(row, name, reason)
        else:
            out[row] = value * factor
    return out


#: Largest magnitude, and smallest error or distance, in internal units (arcsec, au,
#: rad, km/s, pc): squares and ratios of values within these stay finite doubles, and
#: no measurement comes near either.
_LARGEST = 1e100


_SMALLEST = 1e-100


def _out_of_range(scaled: np.ndarray, positive: bool) -> np.ndarray:
    outside = np.abs(scaled) > _LARGEST
    return outside | (scaled < _SMALLEST) if positive else outside


def _range_problem(value: float, factor: float, positive: bool) -> str | None:
    with np.errstate(over="ignore"):
        scaled = float(np.float64(value) * factor)
    if not math.isfinite(scaled) or abs(scaled) > _LARGEST:
        return (f"is too large ({quoted(value)}): massfit takes magnitudes up to "
                f"{_LARGEST:.0e} of its internal units")
    if positive and scaled < _SMALLEST:
        return (f"is too small ({quoted(value)}): an error or distance must be at least "
                f"{_SMALLEST:.0e} of massfit's internal units")
    return None


def _as_floats(column: list) -> np.ndarray | None:
    """The column as floats in one conversion, or None where numpy refuses it."""
    try:
        return np.array(column, dtype=float)
    except (TypeError, ValueError, OverflowError):
        return None


#: Vectorised twins of the value checks: True wherever the check may complain.
_SUSPECT: dict[Callable, Callable[[np.ndarray], np.ndarray]] = {
    check_positive: lambda values: ~(values > 0),
    check_correlation: lambda values: ~((values > -1) & (values < 1)),
}
