"""Read observation tables (plain CSV or ECSV) into :class:`~massfit.read.observations.Observations`.

One file holds one kind of measurement, recognised from its columns: relative astrometry
as ``east``/``north`` offsets or as ``sep``/``pa``, or radial velocities as ``rv``. The
columns and their meaning are those of the project conventions ("Input tables").

How the readers count and report:

- Line numbers are physical and 1-based, as an editor shows them: comment, header and
  blank lines count; CR, LF and CRLF each end one line; a UTF-8 byte-order mark does not
  shift them.
- ``rows_read`` counts data lines (every line that is not blank, not a comment and not the
  line of column names), so ``rows_read == rows_used + len(rejected)`` always holds.
- A row that cannot be used raises :class:`~massfit.errors.InputError` naming the file,
  line, column and reason; with ``skip_bad_rows=True`` it becomes a
  :class:`~massfit.read.observations.Rejection` with the same reason instead. Problems of a
  whole file (a missing column, a missing unit, unstated times, ...) always raise.
- Only the first problem of a row is reported.

Nothing read is evaluated or unpickled: ECSV headers go through astropy's safe YAML
loader and values are converted with ``float`` and :class:`astropy.time.Time`.
"""

from __future__ import annotations

import csv
import math
import os
import re
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import astropy.units as u
import numpy as np
from astropy.io import ascii
from astropy.table import Column, MaskedColumn, vstack
from astropy.time import Time
from astropy.time.formats import TimeNumeric, TimeString

from massfit.errors import ConfigError, InputError
from massfit.read.observations import AstrometryData, Observations, Rejection, VelocityData
from massfit.read.timescales import LEAP_SECOND_NOTE, quiet_leap_seconds

__all__ = ["read_observations", "read_table"]

PathLike = str | os.PathLike

# Formats whose values can be written as text or numbers in a table cell; datetime64
# is a string format in astropy but accepts only numpy datetime64 values.
_TIME_FORMATS = tuple(name for name, cls in Time.FORMATS.items()
                      if issubclass(cls, (TimeNumeric, TimeString)) and name != "datetime64")
# 'local' times have no relation to any other scale, so they cannot become TDB.
_TIME_SCALES = tuple(scale for scale in Time.SCALES if scale != "local")

_COMMENT = re.compile(r"\s*#")
_ECSV_MARK = re.compile(r"\s*#\s*%ECSV\b")
# Universal line ends, and only these: str.splitlines would also split on form feeds and
# other separators that editors do not count as line ends.
_LINE_END = re.compile(r"\r\n|\r|\n")
_MAX_SHOWN = 40  # characters of an offending value quoted in a message
_ECSV_BLOCK_ROWS = 20_000  # data lines per astropy parse (bounds the reader's memory)


# ----------------------------------------------------------------------------- units

@dataclass(frozen=True, eq=False)  # the same kind only when the same object
class _Dimension:
    """A kind of unit a column may carry, and the internal unit it is stored in."""

    target: u.UnitBase
    description: str
    unit_required: bool = True


_ANGLE = _Dimension(u.arcsec, "an angle unit (such as mas, arcsec or deg)")
_LENGTH = _Dimension(u.au, "a length unit (such as km or au)")
_POSITION_ANGLE = _Dimension(u.rad, "an angle unit (such as deg or rad)")
_VELOCITY = _Dimension(u.km / u.s, "a velocity unit (such as km/s or m/s)")
_DISTANCE = _Dimension(u.pc, "a length unit (such as pc or au)")
_PURE_NUMBER = _Dimension(u.dimensionless_unscaled, "no unit", unit_required=False)
# Offsets and their errors: angles or lengths, but one of the two for a whole file.
_OFFSET = (_ANGLE, _LENGTH)

# The measurement columns of each kind of file (all required) and the units they take.
_SETS = {
    "cartesian": {"east": _OFFSET, "north": _OFFSET, "east_err": _OFFSET, "north_err": _OFFSET},
    "polar": {"sep": _OFFSET, "sep_err": _OFFSET,
              "pa": (_POSITION_ANGLE,), "pa_err": (_POSITION_ANGLE,)},
    "rv": {"rv": (_VELOCITY,), "rv_err": (_VELOCITY,)},
}
# The primary's direction per row (a moving line of sight): angles, stored in radians.
_SIGHT = {"primary_ra": (_POSITION_ANGLE,), "primary_dec": (_POSITION_ANGLE,)}
_OPTIONAL = {
    "cartesian": {"corr": (_PURE_NUMBER,), "distance": (_DISTANCE,), **_SIGHT},
    "polar": {"distance": (_DISTANCE,), **_SIGHT},
    "rv": {},
}
#: Every column that takes a unit, in any kind of file.
_UNIT_COLUMNS = frozenset(name for table in (*_SETS.values(), *_OPTIONAL.values())
                          for name in table)
_KIND_NAMES = {"cartesian": "east/north astrometry", "polar": "sep/pa astrometry",
               "rv": "radial velocities"}
_ALWAYS = ("time", "body")


# ----------------------------------------------------------------------------- values

def _positive(value: float) -> str | None:
    return None if value > 0 else f"must be greater than zero (got {value:.6g})"


def _correlation(value: float) -> str | None:
    # |corr| = 1 makes the 2x2 covariance singular, so the bound is strict.
    return None if -1 < value < 1 else f"must lie strictly between -1 and 1 (got {value:.6g})"


_CHECKS: dict[str, Callable[[float], str | None]] = {
    "east_err": _positive, "north_err": _positive, "sep": _positive, "sep_err": _positive,
    "pa_err": _positive, "rv_err": _positive, "distance": _positive, "corr": _correlation,
}
# An empty distance cell means "no distance for this row" (stored as NaN, as documented
# in AstrometryData); every other empty numeric cell is an error.
_MAY_BE_EMPTY = frozenset({"distance"})

_DUPLICATE_KEYS = {
    "astrometry": ("body", "jd1", "jd2", "polar", "length", "east", "north", "sep", "pa",
                   "reference_body"),
    "velocities": ("body", "jd1", "jd2", "rv"),
}


# ----------------------------------------------------------------------------- records

@dataclass(frozen=True)
class _Options:
    """The reader options, checked once for all files."""

    time_format: str | None
    time_scale: str | None
    units: Mapping[str, Any]
    skip_bad_rows: bool
    primary: str


@dataclass(frozen=True)
class _RowIssue:
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
class _Cells:
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


class _Issues:
    """The first problem found in each row of one file."""

    def __init__(self, cells: _Cells):
        self._cells = cells
        self._found: dict[int, tuple[str | None, str]] = {}

    def add(self, row: int, column: str | None, reason: str) -> None:
        self._found.setdefault(int(row), (column, reason))

    def good(self) -> np.ndarray:
        mask = np.ones(len(self._cells.lines), dtype=bool)
        mask[list(self._found)] = False
        return mask

    def listed(self) -> list[_RowIssue]:
        cells = self._cells
        found = [_RowIssue(cells.file, int(cells.lines[row]), column, reason)
                 for row, (column, reason) in self._found.items()]
        return sorted(cells.unreadable + found, key=lambda issue: issue.line)


class _AstropyRefused(Exception):
    """astropy could not parse some ECSV lines; never leaves this module."""


# ----------------------------------------------------------------------------- public API

def read_observations(paths: PathLike | Iterable[PathLike], *, time_format: str | None = None,
                      time_scale: str | None = None, units: Mapping[str, Any] | None = None,
                      skip_bad_rows: bool = False, primary: str = "primary") -> Observations:
    """Read and validate observation tables, merging several files into one set.

    Parameters
    ----------
    paths : str, os.PathLike, or iterable of them
        The CSV or ECSV files. A file is ECSV when its first line starts ``# %ECSV``;
        a file named ``*.ecsv`` must be. The same ``body`` name in several files is the
        same companion.
    time_format, time_scale : str, optional
        The astropy format (``jd``, ``mjd``, ``isot``, ``jyear``, ...) and scale (``utc``,
        ``tt``, ``tdb``, ...) of plain ``time`` columns. They are used where a file does
        not state its own (a native astropy Time column, or the ECSV table meta keys
        ``time_format`` and ``time_scale``); a file's own statement always wins. Where
        neither states them the read is refused: massfit never guesses. A native Time
        column that the meta keys contradict is refused too.
    units : mapping of str to str or astropy unit, optional
        Units of columns, by column name, for files that do not carry them (plain CSV).
        Where an ECSV column has a unit in its header and ``units`` names the column
        too, the two must be the same unit (``mas`` and ``0.001 arcsec`` are); if they
        conflict the read is refused rather than picking one. One mapping may cover
        every kind of file; a name that is neither a column of some file nor a column
        massfit reads is refused (a misspelt column would otherwise go unused). ECSV written from an
        astropy QTable (Quantity columns, serialized in the header) is read the same
        way: each Quantity column's unit is that column's unit.
    skip_bad_rows : bool, optional
        Put rows that cannot be used into ``Observations.rejected`` and carry on, instead
        of raising at the first one. Problems of a whole file still raise.
    primary : str, optional
        The name under which radial velocities of the primary itself are listed.

    Returns
    -------
    Observations
        Astrometry and velocities in internal units (see :mod:`massfit.read.observations`),
        times in TDB; ``astrometry`` or ``velocities`` is None where no row of that
        kind was used.

    Raises
    ------
    massfit.errors.InputError
        For a file, column or row that cannot be used; the message names the file and,
        where they apply, the line and the column.
    massfit.errors.ConfigError
        For an option value that cannot be used.
    """
    options = _options(time_format, time_scale, units, skip_bad_rows, primary)
    observations = Observations(primary=options.primary)
    groups: dict[str, list] = {"astrometry": [], "velocities": []}
    columns: set[str] = set()
    with quiet_leap_seconds() as leap_seconds:
        for file in _file_names(paths):
            group, rows, names = _read_one(file, options, observations)
            groups[group].append(rows)
            columns.update(names)
    if leap_seconds.count:
        observations.notes.append(LEAP_SECOND_NOTE)
    # One mapping may serve every kind of file, so a column massfit reads may be absent;
    # any other name that no file has is a slip (east_er for east_err) and is refused.
    unknown = [name for name in options.units if name not in columns | _UNIT_COLUMNS]
    if unknown:
        raise ConfigError(f"names column(s) {', '.join(map(repr, unknown))}, which no file "
                          f"has and massfit does not read; the files' columns are "
                          f"{', '.join(sorted(columns))}", key="units")
    merged = {group: _without_duplicates(_concatenate(parts), group, options,
                                         observations.rejected)
              for group, parts in groups.items()}
    observations.astrometry = _as_data(AstrometryData, _sight_or_none(merged["astrometry"]))
    observations.velocities = _as_data(VelocityData, merged["velocities"])
    return observations


def read_table(path: PathLike, **options: Any) -> Observations:
    """Read one observation table.

    Parameters
    ----------
    path : str or os.PathLike
        The CSV or ECSV file.
    **options
        The keyword options of :func:`read_observations`.

    Returns
    -------
    Observations
    """
    if not isinstance(path, (str, os.PathLike)):
        raise ConfigError(f"expected one file path, got {type(path).__name__}; "
                          "use read_observations for several files", key="path")
    return read_observations(path, **options)


# ----------------------------------------------------------------------------- options

def _options(time_format, time_scale, units, skip_bad_rows, primary) -> _Options:
    for key, value, accepted in (("time_format", time_format, _TIME_FORMATS),
                                 ("time_scale", time_scale, _TIME_SCALES)):
        problem = None if value is None else _name_problem(value, accepted)
        if problem:
            raise ConfigError(problem, key=key)
    if units is None:
        units = {}
    if not isinstance(units, Mapping):
        raise ConfigError("must map column names to unit strings, such as "
                          "{'east': 'mas', 'rv': 'km/s'}", key="units")
    if not isinstance(primary, str) or not primary.strip():
        raise ConfigError("must be a non-empty name", key="primary")
    if not isinstance(skip_bad_rows, (bool, np.bool_)):
        raise ConfigError("must be True or False", key="skip_bad_rows")
    return _Options(time_format, time_scale, units, bool(skip_bad_rows), primary.strip())


def _name_problem(value: Any, accepted: tuple[str, ...]) -> str | None:
    if isinstance(value, str) and value in accepted:
        return None
    return f"{value!r} is not one of the accepted names: {', '.join(accepted)}"


def _file_names(paths) -> list[str]:
    if isinstance(paths, (str, os.PathLike)):
        paths = [paths]
    try:
        paths = list(paths)
    except TypeError:
        raise ConfigError(f"expected a file path or a list of them, got "
                          f"{type(paths).__name__}", key="paths") from None
    if not paths:
        raise ConfigError("no observation files were given", key="paths")
    names, seen = [], set()
    for path in paths:
        if not isinstance(path, (str, os.PathLike)):
            raise ConfigError(f"expected file paths, got {type(path).__name__}", key="paths")
        name = os.fspath(path)
        # Reading one file twice would make every row a duplicate of itself.
        real = os.path.realpath(name)
        if real in seen:
            raise InputError("is listed more than once", file=name)
        seen.add(real)
        names.append(str(name))
    return names


# ----------------------------------------------------------------------------- one file

def _read_one(file: str, options: _Options,
              observations: Observations) -> tuple[str, dict, list[str]]:
    """Read one file, record what it contributes; return its usable rows and columns."""
    cells = _split_file(file)
    kind = _kind(cells)
    group, rows, issues = _validated_rows(cells, kind, options)
    observations.files.append(file)
    observations.rows_read += cells.rows_read
    observations.unused_columns[file] = [name for name in cells.names
                                         if name not in _used_columns(cells, kind)]
    _settle(issues, options, observations.rejected)
    return group, rows, list(cells.names)


def _split_file(file: str) -> _Cells:
    lines = _load_lines(file)
    comments, names_at, data = _classify(lines)
    if names_at is None:
        raise InputError("holds only comments and blank lines; expected a line of column "
                         "names followed by data rows", file=file)
    first = comments[0] if comments else names_at
    if _ECSV_MARK.match(lines[first]):
        return _ecsv_cells(file, lines, comments, names_at, data)
    if Path(file).suffix.lower() == ".ecsv":
        raise InputError("is named .ecsv but does not start with an ECSV header line "
                         "'# %ECSV 1.0'", file=file)
    return _csv_cells(file, lines, names_at, data)


def _load_lines(file: str) -> list[str]:
    try:
        raw = Path(file).read_bytes()
    except FileNotFoundError:
        raise InputError("does not exist", file=file) from None
    except IsADirectoryError:
        raise InputError("is a directory, not a table file", file=file) from None
    except OSError as exc:
        raise InputError(f"cannot be read ({exc.strerror or exc})", file=file) from None
    if b"\x00" in raw:
        raise InputError("contains NUL bytes: it is a binary file, not a CSV or ECSV table",
                         file=file)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(f"is not UTF-8 text (undecodable byte at offset {exc.start}); "
                         "save it as UTF-8 CSV or ECSV", file=file) from None
    if not text.strip():
        raise InputError("is empty", file=file)
    return _LINE_END.split(text)


def _classify(lines: list[str]) -> tuple[list[int], int | None, list[int]]:
    """Indices of the comment lines before the column names, of that line, and of data."""
    comments, names_at, data = [], None, []
    for index, line in enumerate(lines):
        if not line.strip():
            continue
        if _COMMENT.match(line):
            if names_at is None:
                comments.append(index)
        elif names_at is None:
            names_at = index
        else:
            data.append(index)
    return comments, names_at, data


def _require_rows(file: str, data: list[int]) -> None:
    if not data:
        raise InputError("has a header but no data rows", file=file)


def _count_reason(found: int, expected: int) -> str:
    return f"has {found} values where the header names {expected} columns"


def _shown(value: Any) -> str:
    if isinstance(value, np.generic):  # a cell of a column kept as an array
        value = value.item()
    text = repr(value)
    return text if len(text) <= _MAX_SHOWN else text[:_MAX_SHOWN - 3] + "..."


# ----------------------------------------------------------------------------- plain CSV

def _csv_split(line: str) -> tuple[list[str] | None, str | None]:
    try:
        return next(csv.reader([line], strict=True, skipinitialspace=True)), None
    except (csv.Error, StopIteration) as exc:
        return None, f"cannot be split into comma-separated values ({exc})"


def _csv_cells(file: str, lines: list[str], names_at: int, data: list[int]) -> _Cells:
    names = _csv_names(file, lines[names_at], names_at + 1)
    _require_rows(file, data)
    values: dict[str, list] = {name: [] for name in names}
    kept, unreadable = [], []
    for index in data:
        tokens, problem = _csv_split(lines[index])
        if problem is None and len(tokens) != len(names):
            problem = _count_reason(len(tokens), len(names))
        if problem:
            unreadable.append(_RowIssue(file, index + 1, None, problem))
            continue
        for name, token in zip(names, tokens):
            values[name].append(token.strip() or None)
        kept.append(index + 1)
    return _Cells(file, names, values, np.array(kept, dtype=int), len(data), unreadable)


def _csv_names(file: str, line: str, number: int) -> list[str]:
    tokens, problem = _csv_split(line)
    if problem:
        raise InputError(f"the header {problem}", file=file, line=number)
    names = [token.strip() for token in tokens]
    if not set(names) & set(_ALWAYS):
        # Perhaps not a table at all (a path slip to some other file): say so without
        # quoting it, as its first line may hold anything.
        raise InputError("is not an observation table: its first line names no 'time' or "
                         "'body' column (a CSV table starts with a line of column names "
                         "such as time,body,east,north,east_err,north_err)", file=file,
                         line=number)
    if "" in names:
        raise InputError(f"column {names.index('') + 1} of the header has no name",
                         file=file, line=number)
    repeated = sorted({name for name in names if names.count(name) > 1})
    if repeated:
        raise InputError(f"the header names column(s) {', '.join(repeated)} more than once",
                         file=file, line=number)
    return names


# ----------------------------------------------------------------------------- ECSV

def _ecsv_parse(head: list[str], rows: list[tuple[int, str]]):
    """Parse the header and data rows with astropy; return the reader and the table.

    The table must have one row per data line, or the line numbers would be wrong.
    """
    # The same reader settings as astropy.io.ascii.read without guessing; empty cells
    # become masked values.
    # Big files go through astropy in blocks: its reader holds every cell as a Python
    # string while it parses, several times the size of the finished table.
    blocks = []
    for start in range(0, max(len(rows), 1), _ECSV_BLOCK_ROWS):
        block = rows[start:start + _ECSV_BLOCK_ROWS]
        reader = ascii.get_reader(ascii.Ecsv, fill_values=[("", "0")])
        try:
            table = reader.read(head + [text for _, text in block])
        except Exception as exc:  # astropy raises many types for malformed text
            raise _AstropyRefused(_explained(exc)) from None
        if len(table) != len(block):
            # An unclosed quote makes astropy join a line with the next ones.
            raise _AstropyRefused("a quoted value runs past the end of its line")
        blocks.append(table)
    if len(blocks) == 1:
        return reader, blocks[0]
    try:
        return reader, vstack(blocks, join_type="exact", metadata_conflicts="silent")
    except Exception as exc:  # blocks whose columns came out differently typed
        raise _AstropyRefused(_explained(exc)) from None


def _explained(exc: BaseException) -> str:
    """One line from an exception and its causes (astropy wraps YAML errors, for one)."""
    parts = []
    while exc is not None and len(parts) < 3:
        text = " ".join(str(exc).split())
        if text:
            parts.append(text)
        exc = exc.__cause__
    return ": ".join(parts) or "no reason given"


def _ecsv_cells(file: str, lines: list[str], comments: list[int], names_at: int,
                data: list[int]) -> _Cells:
    head = [lines[index] for index in comments] + [lines[names_at]]
    try:
        reader, empty = _ecsv_parse(head, [])
    except _AstropyRefused as exc:
        # The YAML parser counts lines of the header text, not of the file: a tab (the
        # usual culprit, which YAML refuses) is found and named at its own line.
        tabbed = [index for index in comments if "\t" in lines[index]]
        if tabbed:
            raise InputError("holds a tab in the ECSV header; the header is YAML, which "
                             "takes spaces only", file=file, line=tabbed[0] + 1) from None
        raise InputError(f"has a malformed ECSV header: {exc}", file=file) from None
    _require_rows(file, data)
    rows = [(index + 1, lines[index]) for index in data]
    table, good, unreadable = _ecsv_rows(file, head, rows, reader, empty)
    return _table_cells(file, table, [line for line, _ in good], len(rows), unreadable)


def _ecsv_rows(file: str, head: list[str], rows: list[tuple[int, str]], reader, empty):
    """The table of the readable data rows, those rows, and issues for the others."""
    try:
        return _ecsv_parse(head, rows)[1], rows, []
    except _AstropyRefused:
        pass
    good, bad = _readable(head, rows)
    unreadable = [_RowIssue(file, line, *_diagnose(text, cause, reader, empty))
                  for (line, text), cause in bad]
    if not good:
        return empty, good, unreadable
    try:
        return _ecsv_parse(head, good)[1], good, unreadable
    except _AstropyRefused as exc:
        raise InputError(f"cannot be read as ECSV: {exc}", file=file) from None


def _readable(head: list[str], rows: list[tuple[int, str]]):
    """Split data rows into those astropy can read and (row, reason) for the others.

    Halving the rows until each failure stands alone costs a few parses per bad row
    instead of one parse per row.
    """
    try:
        _ecsv_parse(head, rows)
        return rows, []
    except _AstropyRefused as exc:
        if len(rows) == 1:
            return [], [(rows[0], str(exc))]
    middle = len(rows) // 2
    good_first, bad_first = _readable(head, rows[:middle])
    good_last, bad_last = _readable(head, rows[middle:])
    return good_first + good_last, bad_first + bad_last


def _diagnose(text: str, cause: str, reader, empty) -> tuple[str | None, str]:
    """The column and reason for one data line that astropy refused."""
    columns = reader.header.cols
    try:
        tokens = next(iter(reader.data.splitter([text])))
    except Exception as exc:  # csv.Error and whatever else the splitter meets
        return None, f"cannot be split into values ({exc})"
    if len(tokens) != len(columns):
        return None, _count_reason(len(tokens), len(columns))
    for column, token in zip(columns, tokens):
        problem = _token_problem(column, token)
        if problem:
            # Mixin columns are stored as parts named like 'time.jd1'.
            base = column.name.split(".")[0]
            return (base if base in empty.colnames else column.name), problem
    raw_names = [column.name for column in columns]
    for name in empty.colnames:
        if isinstance(empty[name], Time) and name in raw_names:
            token = tokens[raw_names.index(name)]
            if token and not _time_parses(token, empty[name]):
                return name, f"{_shown(token)} is not a valid time in format " \
                             f"'{empty[name].format}'"
    return None, f"cannot be read ({cause})"


def _token_problem(column, token: str) -> str | None:
    # Empty cells become masked values, and JSON-encoded cells have their own decoder,
    # so only plain scalar cells are checked here.
    if token == "" or column.shape or column.subtype:
        return None
    try:
        ascii.convert_numpy(column.dtype)[0]([token])
    except Exception:  # numpy's conversions raise ValueError, TypeError, OverflowError...
        return f"{_shown(token)} is not {_dtype_words(column.dtype)}"
    return None


def _dtype_words(dtype: str) -> str:
    try:
        kind = np.dtype(dtype).kind
    except TypeError:
        kind = ""
    words = {"f": "a number", "i": "an integer", "u": "a non-negative integer",
             "b": "True or False", "c": "a complex number"}
    return words.get(kind, f"a valid {dtype} value")


def _time_parses(token: str, like: Time) -> bool:
    try:
        Time(token, format=like.format, scale=like.scale)
    except Exception:  # astropy.time raises several types for values it cannot parse
        return False
    return True


def _table_cells(file: str, table, lines: list[int], rows_read: int,
                 unreadable: list[_RowIssue]) -> _Cells:
    values, units = {}, {}
    for name in table.colnames:
        column = _quantity_as_column(table[name])
        if isinstance(column, Column):
            values[name] = _column_values(column)
            if column.unit is not None:
                units[name] = column.unit
    native = table["time"] if "time" in table.colnames and isinstance(table["time"], Time) \
        else None
    return _Cells(file, list(table.colnames), values, np.array(lines, dtype=int), rows_read,
                  unreadable, units, dict(table.meta), native)


def _quantity_as_column(column):
    """A Quantity column (an ECSV file written from a QTable) as a Column with its unit.

    Its unit is then checked like a unit stated in the header of a plain column.
    """
    if not isinstance(column, u.Quantity):
        return column
    unmasked = getattr(column, "unmasked", column)  # astropy's Masked quantities
    mask = np.asarray(getattr(column, "mask", np.zeros(column.shape, dtype=bool)))
    return MaskedColumn(np.asarray(unmasked.value), mask=mask, unit=column.unit)


def _column_values(column: Column) -> list | np.ndarray:
    mask = np.ma.getmaskarray(column)
    if column.dtype.kind == "f" and column.ndim == 1 and not mask.any():
        # Numbers stay an array: a list of Python floats costs ~4x the memory.
        return np.array(np.ma.getdata(column), dtype=float)
    data = np.ma.getdata(column).tolist()
    masked = mask.any(axis=tuple(range(1, mask.ndim)))
    return [None if hidden else value for value, hidden in zip(data, masked)]


# ----------------------------------------------------------------------------- columns

def _kind(cells: _Cells) -> str:
    """Which kind of file this is, from its columns; refuse incomplete or mixed sets."""
    names = set(cells.names)
    started = [kind for kind, columns in _SETS.items() if names & set(columns)]
    if not started:
        raise InputError(
            "has none of the columns massfit reads: astrometry needs time, body, east, "
            "north, east_err, north_err (or sep, pa, sep_err, pa_err) and radial "
            f"velocities need time, body, rv, rv_err; found {', '.join(cells.names)}",
            file=cells.file)
    if len(started) > 1:
        raise InputError(f"mixes the columns of {' and '.join(_KIND_NAMES[k] for k in started)}"
                         "; put each kind of measurement in its own file", file=cells.file)
    kind = started[0]
    missing = [name for name in (*_ALWAYS, *_SETS[kind]) if name not in names]
    if missing:
        raise InputError(f"lacks the column(s) {', '.join(missing)} needed for "
                         f"{_KIND_NAMES[kind]}", file=cells.file,
                         column=missing[0] if len(missing) == 1 else None)
    return kind


def _measured_columns(cells: _Cells, kind: str) -> dict[str, tuple[_Dimension, ...]]:
    optional = {name: dims for name, dims in _OPTIONAL[kind].items() if name in cells.names}
    return {**_SETS[kind], **optional}


def _used_columns(cells: _Cells, kind: str) -> set[str]:
    used = set(_ALWAYS) | set(_measured_columns(cells, kind))
    return used | ({"instrument"} if kind == "rv" else {"reference_body"})


def _given_unit(cells: _Cells, name: str, options: _Options) -> u.UnitBase | None:
    if name not in options.units:
        return None
    value = options.units[name]
    try:
        if not isinstance(value, (str, u.UnitBase)):
            raise TypeError(value)
        return u.Unit(value)
    except (ValueError, TypeError):
        raise InputError(f"the unit {_shown(value)} given for it in `units` is not a unit "
                         "astropy can parse", file=cells.file, column=name) from None


def _unit(cells: _Cells, name: str, options: _Options) -> u.UnitBase | None:
    given = _given_unit(cells, name, options)
    stated = cells.units.get(name)
    if stated is None:
        return given
    if isinstance(stated, u.UnrecognizedUnit):
        raise InputError(f"has unit '{stated}' in the ECSV header, which astropy does not "
                         "recognise", file=cells.file, column=name)
    if given is not None and given != stated:
        raise InputError(f"has unit '{stated}' in the ECSV header but '{given}' in `units`; "
                         "remove one or make them agree", file=cells.file, column=name)
    return stated


def _factor(cells: _Cells, name: str, choices: tuple[_Dimension, ...], options: _Options,
            note: str = "") -> tuple[float, _Dimension]:
    """The factor from the column's unit to the internal unit, and the kind that matched."""
    unit = _unit(cells, name, options)
    accepted = " or ".join(dim.description for dim in choices) + note
    if unit is None:
        if not choices[0].unit_required:
            return 1.0, choices[0]
        raise InputError(f"has no unit; it needs {accepted}: state it in the ECSV header, "
                         "or with `units` in the config or the --units option",
                         file=cells.file, column=name)
    for dim in choices:
        if unit.is_equivalent(dim.target):
            return float(unit.to(dim.target)), dim
    raise InputError(f"has unit '{unit}', but it needs {accepted}", file=cells.file,
                     column=name)


def _factors(cells: _Cells, columns: dict, options: _Options) -> tuple[dict[str, float], bool]:
    """Conversion factors of all measured columns, and whether offsets are lengths."""
    factors: dict[str, float] = {}
    offset, first = None, None
    for name, choices in columns.items():
        note = ""
        if choices is _OFFSET and offset is not None:
            choices, note = (offset,), f", like '{first}' (one kind of offset unit per file)"
        factors[name], dim = _factor(cells, name, choices, options, note)
        if dim in _OFFSET and offset is None:
            offset, first = dim, name
    return factors, offset is _LENGTH


# ----------------------------------------------------------------------------- rows

def _validated_rows(cells: _Cells, kind: str, options: _Options):
    """Convert one file's cells; return its group, its usable rows and its row issues."""
    columns = _measured_columns(cells, kind)
    factors, length = _factors(cells, columns, options)
    issues = _Issues(cells)
    body = _texts(cells, issues, "body", required=True)
    if kind != "rv":
        for row in np.flatnonzero(body == options.primary):
            issues.add(row, "body", f"is the primary's name '{options.primary}', but "
                                    "astrometry gives a companion's offset from the primary")
    jd1, jd2 = _times(cells, options, issues)
    values = {name: _numbers(cells, issues, name, factor) for name, factor in factors.items()}
    count = len(cells.lines)
    if kind == "rv":
        group, rows = "velocities", {"rv": values["rv"], "rv_err": values["rv_err"],
                                     "instrument": _instruments(cells, issues)}
    else:
        _check_sight(cells, values, issues)
        group, rows = "astrometry", _astrometry_rows(kind, values, length, count)
        rows["reference_body"] = _references(cells, issues, body, options.primary)
    rows.update(body=body, jd1=jd1, jd2=jd2, file=np.full(count, cells.file),
                line=cells.lines)
    good = issues.good()
    return group, _rows_where(rows, good), issues.listed()


def _check_sight(cells: _Cells, values: dict, issues: _Issues) -> None:
    """The primary's direction: both angles or neither, a distance on every row."""
    given = [name for name in _SIGHT if name in values]
    if not given:
        return
    if len(given) == 1:
        other = "primary_dec" if given[0] == "primary_ra" else "primary_ra"
        raise InputError(f"has '{given[0]}' without '{other}'; the primary's direction "
                         "needs both", file=cells.file, column=other)
    if "distance" not in values:
        raise InputError("gives the primary's direction (primary_ra, primary_dec) but no "
                         "'distance' column; the projection needs the primary's distance "
                         "on every row", file=cells.file, column="distance")
    for row in np.flatnonzero(~np.isfinite(values["distance"])):
        issues.add(row, "distance", "is empty; rows with the primary's direction need "
                                    "its distance")
    dec = values["primary_dec"]
    with np.errstate(invalid="ignore"):
        outside = np.abs(dec) > 0.5 * np.pi * (1.0 + 1e-12)
    for row in np.flatnonzero(outside):
        issues.add(row, "primary_dec", "must lie between -90 and +90 degrees")


def _references(cells: _Cells, issues: _Issues, body: np.ndarray,
                primary: str) -> np.ndarray:
    """The body each offset is measured from; "" for the primary."""
    if "reference_body" not in cells.names:
        return np.full(len(cells.lines), "")
    names = _texts(cells, issues, "reference_body", required=False)
    names = np.where(names == primary, "", names)
    for row in np.flatnonzero((names != "") & (names == body)):
        issues.add(row, "reference_body", f"is the row's own body '{body[row]}'; an "
                                          "offset is measured from another body")
    return names


def _astrometry_rows(kind: str, values: dict, length: bool, count: int) -> dict:
    missing = np.full(count, np.nan)
    names = ("east", "north", "east_err", "north_err", "sep", "sep_err", "pa", "pa_err",
             "distance", "primary_ra", "primary_dec")
    rows = {name: values.get(name, missing) for name in names}
    rows["corr"] = values.get("corr", np.zeros(count) if kind == "cartesian" else missing)
    rows["polar"] = np.full(count, kind == "polar")
    rows["length"] = np.full(count, length)
    return rows


def _instruments(cells: _Cells, issues: _Issues) -> np.ndarray:
    if "instrument" not in cells.names:
        return np.full(len(cells.lines), "")
    return _texts(cells, issues, "instrument", required=False)


def _column_cells(cells: _Cells, name: str) -> list:
    try:
        return cells.values[name]
    except KeyError:
        raise InputError("is not a plain column of values (astropy read it as an object "
                         "column); write plain values", file=cells.file, column=name) from None


def _is_empty(cell: Any) -> bool:
    return cell is None or (isinstance(cell, str) and not cell.strip())


def _texts(cells: _Cells, issues: _Issues, name: str, required: bool) -> np.ndarray:
    texts = []
    for row, cell in enumerate(_column_cells(cells, name)):
        text = "" if _is_empty(cell) else str(cell).strip()
        if required and not text:
            issues.add(row, name, "is empty")
        texts.append(text)
    return np.array(texts, dtype=str)


def _number(cell: Any) -> tuple[float, str | None]:
    if _is_empty(cell):
        return math.nan, "is empty"
    try:
        value = float(cell.strip() if isinstance(cell, str) else cell)
    except (TypeError, ValueError, OverflowError):
        return math.nan, f"is not a number ({_shown(cell)})"
    if not math.isfinite(value):
        return value, f"is not a finite number ({_shown(cell)})"
    return value, None


def _numbers(cells: _Cells, issues: _Issues, name: str, factor: float) -> np.ndarray:
    check = _CHECKS.get(name, lambda value: None)
    column = _column_cells(cells, name)
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
            suspect |= _out_of_range(scaled, check is _positive)
        out = np.where(suspect, np.nan, scaled)
        rows = np.flatnonzero(suspect).tolist()
    for row in rows:
        cell = column[row]
        if name in _MAY_BE_EMPTY and _is_empty(cell):
            continue
        value, reason = _number(cell)
        reason = reason or check(value)
        if reason is None:
            reason = _range_problem(value, factor, check is _positive)
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
        return (f"is too large ({_shown(value)}): massfit takes magnitudes up to "
                f"{_LARGEST:.0e} of its internal units")
    if positive and scaled < _SMALLEST:
        return (f"is too small ({_shown(value)}): an error or distance must be at least "
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
    _positive: lambda values: ~(values > 0),
    _correlation: lambda values: ~((values > -1) & (values < 1)),
}


# ----------------------------------------------------------------------------- times

def _times(cells: _Cells, options: _Options, issues: _Issues) -> tuple[np.ndarray, np.ndarray]:
    """TDB Julian dates (two parts) of each row; NaN where the time cannot be used."""
    if cells.native_time is not None:
        native = _native_time(cells)
        masked = np.broadcast_to(np.asarray(getattr(native, "mask", False)), native.shape)
        return _tdb_dates(lambda rows: native[rows], masked, issues,
                          lambda row: "cannot be converted to TDB")
    time_format = _stated(cells, "time_format", options.time_format, _TIME_FORMATS)
    time_scale = _stated(cells, "time_scale", options.time_scale, _TIME_SCALES)
    raw = _column_cells(cells, "time")
    masked = np.array([_is_empty(cell) for cell in raw], dtype=bool)
    return _tdb_dates(
        lambda rows: Time([raw[row] for row in rows], format=time_format, scale=time_scale),
        masked, issues,
        lambda row: f"{_shown(raw[row])} is not a valid time in format '{time_format}' "
                    f"and scale '{time_scale}'")


_J2000_JD = 2451545.0
#: Times further than this from J2000 are refused: their spans would make nonsense of
#: the period search (periods up to 1e9 d), and no observation is that old.
_TIME_RANGE_DAYS = 1e8


def _native_time(cells: _Cells) -> Time:
    native = cells.native_time
    if native.ndim != 1:
        raise InputError("must hold one time per row", file=cells.file, column="time")
    # A file that says two different things about its times is refused, not resolved.
    for key, attribute in (("time_format", "format"), ("time_scale", "scale")):
        stated = cells.meta.get(key, getattr(native, attribute))
        if not isinstance(stated, str) or stated != getattr(native, attribute):
            raise InputError(f"is an astropy Time column with {attribute} "
                             f"'{getattr(native, attribute)}', but the table meta key `{key}` "
                             f"says {_shown(stated)}", file=cells.file, column="time")
    return native


def _stated(cells: _Cells, key: str, fallback: str | None, accepted: tuple[str, ...]) -> str:
    """The time format or scale a file states, else the option's, else refuse."""
    if key in cells.meta:
        problem = _name_problem(cells.meta[key], accepted)
        if problem:
            raise InputError(f"the table meta key `{key}`: {problem}", file=cells.file,
                             column="time")
        return cells.meta[key]
    if fallback is not None:
        return fallback
    what = key.split("_")[1]
    raise InputError(
        f"the {what} of the times is not stated, and massfit does not guess it: state it "
        f"with the table meta key `{key}` in an ECSV file, or with `{key}` in the config or "
        f"--{key.replace('_', '-')} on the command line (for example "
        f"{'mjd, jd, isot or jyear' if key == 'time_format' else 'utc, tt or tdb'})",
        file=cells.file, column="time")


def _tdb_dates(make: Callable[[list[int]], Time], masked: np.ndarray, issues: _Issues,
               why: Callable[[int], str]) -> tuple[np.ndarray, np.ndarray]:
    """Convert the unmasked rows to TDB with ``make(rows)``, all together where possible.

    Where the batch fails, rows are converted one at a time so that only the bad ones
    are reported.
    """
    dates = np.full((2, len(masked)), np.nan)
    for row in np.flatnonzero(masked):
        issues.add(row, "time", "is empty")
    rows = np.flatnonzero(~masked).tolist()
    for done, time in _converted(make, rows, issues, why):
        dates[:, done] = np.array([time.jd1, time.jd2]).reshape(2, -1)
    jd = dates.sum(axis=0)
    for row in np.flatnonzero(~np.isfinite(jd) & ~masked):
        issues.add(row, "time", "is not a finite time")
    with np.errstate(invalid="ignore"):
        far = np.abs(jd - _J2000_JD) > _TIME_RANGE_DAYS
    for row in np.flatnonzero(far):
        issues.add(row, "time", f"is JD {jd[row]:.6g} (TDB), more than {_TIME_RANGE_DAYS:.0e} "
                                f"days (about 270 000 years) from J2000; massfit takes "
                                f"times within that range")
    return dates[0], dates[1]


def _converted(make, rows: list[int], issues: _Issues, why) -> list[tuple[list[int], Time]]:
    if not rows:
        return []
    try:
        return [(rows, make(rows).tdb)]
    except Exception:  # astropy.time raises ValueError, TypeError, ErfaError, ... per value
        pass
    done = []
    for row in rows:
        try:
            done.append(([row], make([row]).tdb))
        except Exception:  # as above; this row is reported instead
            issues.add(row, "time", why(row))
    return done


# ----------------------------------------------------------------------------- merging

def _settle(issues: list[_RowIssue], options: _Options, rejected: list) -> None:
    """Raise the first issue, or record them all as rejections when rows may be skipped."""
    if issues and not options.skip_bad_rows:
        raise issues[0].error()
    rejected.extend(issue.rejection() for issue in issues)


def _concatenate(parts: list[dict]) -> dict | None:
    if not parts:
        return None
    if len(parts) == 1:
        return parts[0]
    return {key: np.concatenate([part[key] for part in parts]) for key in parts[0]}


def _rows_where(rows: dict, mask: np.ndarray) -> dict:
    """The rows where ``mask`` holds; the same arrays, uncopied, where it always does."""
    if np.all(mask):  # the usual case, and a copy of a million rows is not free
        return rows
    return {key: value[mask] for key, value in rows.items()}


def _first_of_each(rows: dict, keys: tuple) -> np.ndarray:
    """For each row, the index of the first row with the same values in ``keys``.

    Values compare as numbers do (0.0 and -0.0 alike), except that NaN matches NaN: the
    unused fields of a row are NaN and must still match.
    """
    n = len(rows["line"])
    if n == 0:
        return np.zeros(0, dtype=int)
    codes = []
    for key in keys:
        values = np.asarray(rows[key])
        if values.dtype.kind == "f":
            values = np.where(np.isnan(values), np.nan, values + 0.0)  # one NaN, no -0
            codes.append(values.view(np.int64))
        else:
            codes.append(np.unique(values, return_inverse=True)[1].astype(np.int64))
    _, first_index, inverse = np.unique(np.column_stack(codes), axis=0, return_index=True,
                                        return_inverse=True)
    return first_index[inverse.ravel()]


def _without_duplicates(rows: dict | None, group: str, options: _Options,
                        rejected: list) -> dict | None:
    """Drop (or refuse) rows with the body, time and values of an earlier row."""
    if rows is None:
        return None
    keys = _DUPLICATE_KEYS[group]
    first = _first_of_each(rows, keys)
    keep = np.ones(len(rows["line"]), dtype=bool)
    issues = []
    for row in np.flatnonzero(first != np.arange(first.size)):
        earlier = first[row]
        where = f"line {rows['line'][earlier]}"
        if rows["file"][earlier] != rows["file"][row]:
            where = f"{rows['file'][earlier]} {where}"
        issues.append(_RowIssue(str(rows["file"][row]), int(rows["line"][row]), None,
                                f"repeats {where} (same body, time and values)"))
        keep[row] = False
    _settle(issues, options, rejected)
    return _rows_where(rows, keep)


def _sight_or_none(rows: dict | None) -> dict | None:
    """Keep the primary's direction only where rows give it, and then on every row."""
    if rows is None or not len(rows["line"]):
        return rows
    rows = dict(rows)
    given = np.isfinite(rows["primary_ra"])
    if not np.any(given):
        rows["primary_ra"] = rows["primary_dec"] = None
    elif not np.all(given):
        row = int(np.flatnonzero(~given)[0])
        raise InputError("has no primary direction while other astrometric rows have "
                         "one; give primary_ra and primary_dec (and distance) for every "
                         "astrometric row, or for none", file=str(rows["file"][row]),
                         line=int(rows["line"][row]), column="primary_ra")
    if not np.any(rows["reference_body"] != ""):
        rows["reference_body"] = None
    return rows


def _as_data(cls, rows: dict | None):
    if rows is None or not len(rows["line"]):
        return None
    rows = dict(rows)
    time = Time(rows.pop("jd1"), rows.pop("jd2"), format="jd", scale="tdb")
    return cls(time=time, **rows)
