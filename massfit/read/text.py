"""A file's lines, split into cells: plain CSV or ECSV (through astropy's safe reader).

Line numbers are physical and 1-based, as an editor shows them: comment, header and blank
lines count; CR, LF and CRLF each end one line; a UTF-8 byte-order mark does not shift them.
"""
from __future__ import annotations

import csv
import re
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.io import ascii
from astropy.table import Column, MaskedColumn, vstack
from astropy.time import Time

from massfit.errors import InputError
from massfit.read.cells import Cells, RowIssue, quoted
from massfit.read.columns import ALWAYS

_COMMENT = re.compile(r"\s*#")


_ECSV_MARK = re.compile(r"\s*#\s*%ECSV\b")


# Universal line ends, and only these: str.splitlines would also split on form feeds and
# other separators that editors do not count as line ends.
_LINE_END = re.compile(r"\r\n|\r|\n")


_ECSV_BLOCK_ROWS = 20_000  # data lines per astropy parse (bounds the reader's memory)


class _AstropyRefused(Exception):
    """astropy could not parse some ECSV lines; never leaves this module."""


def split_file(file: str) -> Cells:
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


def _csv_split(line: str) -> tuple[list[str] | None, str | None]:
    try:
        return next(csv.reader([line], strict=True, skipinitialspace=True)), None
    except (csv.Error, StopIteration) as exc:
        return None, f"cannot be split into comma-separated values ({exc})"


def _csv_cells(file: str, lines: list[str], names_at: int, data: list[int]) -> Cells:
    names = _csv_names(file, lines[names_at], names_at + 1)
    _require_rows(file, data)
    values: dict[str, list] = {name: [] for name in names}
    kept, unreadable = [], []
    for index in data:
        tokens, problem = _csv_split(lines[index])
        if problem is None and len(tokens) != len(names):
            problem = _count_reason(len(tokens), len(names))
        if problem:
            unreadable.append(RowIssue(file, index + 1, None, problem))
            continue
        for name, token in zip(names, tokens):
            values[name].append(token.strip() or None)
        kept.append(index + 1)
    return Cells(file, names, values, np.array(kept, dtype=int), len(data), unreadable)


def _csv_names(file: str, line: str, number: int) -> list[str]:
    tokens, problem = _csv_split(line)
    if problem:
        raise InputError(f"the header {problem}", file=file, line=number)
    names = [token.strip() for token in tokens]
    if not set(names) & set(ALWAYS):
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
                data: list[int]) -> Cells:
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
    unreadable = [RowIssue(file, line, *_diagnose(text, cause, reader, empty))
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
                return name, f"{quoted(token)} is not a valid time in format " \
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
        return f"{quoted(token)} is not {_dtype_words(column.dtype)}"
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
                 unreadable: list[RowIssue]) -> Cells:
    values, units = {}, {}
    for name in table.colnames:
        column = _quantity_as_column(table[name])
        if isinstance(column, Column):
            values[name] = _column_values(column)
            if column.unit is not None:
                units[name] = column.unit
    native = table["time"] if "time" in table.colnames and isinstance(table["time"], Time) \
        else None
    return Cells(file, list(table.colnames), values, np.array(lines, dtype=int), rows_read,
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
