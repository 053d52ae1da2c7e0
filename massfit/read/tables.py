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

import os
from collections.abc import Iterable, Mapping
from typing import Any

import numpy as np
from astropy.time import Time

from massfit.errors import ConfigError, InputError
from massfit.read.cells import Cells, Issues, Options, RowIssue, read_numbers, read_texts
from massfit.read.columns import SIGHT, UNIT_COLUMNS
from massfit.read.observations import AstrometryData, Observations, VelocityData
from massfit.read.text import split_file
from massfit.read.time_column import (TIME_FORMATS, TIME_SCALES, name_problem, read_times,
                                      stated_time_form)
from massfit.read.timescales import LEAP_SECOND_NOTE, quiet_leap_seconds
from massfit.read.units import (measured_columns, stated_units, table_kind, unit_factors,
                                used_columns)

__all__ = ["read_observations", "read_table"]


PathLike = str | os.PathLike


_DUPLICATE_KEYS = {
    "astrometry": ("body", "jd1", "jd2", "polar", "length", "east", "north", "sep", "pa",
                   "reference_body"),
    "velocities": ("body", "jd1", "jd2", "rv"),
}


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
    unknown = [name for name in options.units if name not in columns | UNIT_COLUMNS]
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


def _options(time_format, time_scale, units, skip_bad_rows, primary) -> Options:
    for key, value, accepted in (("time_format", time_format, TIME_FORMATS),
                                 ("time_scale", time_scale, TIME_SCALES)):
        problem = None if value is None else name_problem(value, accepted)
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
    return Options(time_format, time_scale, units, bool(skip_bad_rows), primary.strip())


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


def _read_one(file: str, options: Options,
              observations: Observations) -> tuple[str, dict, list[str]]:
    """Read one file, record what it contributes; return its usable rows and columns."""
    cells = split_file(file)
    kind = table_kind(cells)
    group, rows, issues = _validated_rows(cells, kind, options)
    observations.files.append(file)
    observations.rows_read += cells.rows_read
    observations.unused_columns[file] = [name for name in cells.names
                                         if name not in used_columns(cells, kind)]
    observations.stated[file] = {**stated_time_form(cells, options),
                                 "units": stated_units(cells, measured_columns(cells, kind),
                                                       options)}
    _settle(issues, options, observations.rejected)
    return group, rows, list(cells.names)


def _validated_rows(cells: Cells, kind: str, options: Options):
    """Convert one file's cells; return its group, its usable rows and its row issues."""
    columns = measured_columns(cells, kind)
    factors, length = unit_factors(cells, columns, options)
    issues = Issues(cells)
    body = read_texts(cells, issues, "body", required=True)
    if kind != "rv":
        for row in np.flatnonzero(body == options.primary):
            issues.add(row, "body", f"is the primary's name '{options.primary}', but "
                                    "astrometry gives a companion's offset from the primary")
    jd1, jd2 = read_times(cells, options, issues)
    values = {name: read_numbers(cells, issues, name, factor) for name, factor in factors.items()}
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


def _check_sight(cells: Cells, values: dict, issues: Issues) -> None:
    """The primary's direction: both angles or neither, a distance on every row."""
    given = [name for name in SIGHT if name in values]
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


def _references(cells: Cells, issues: Issues, body: np.ndarray,
                primary: str) -> np.ndarray:
    """The body each offset is measured from; "" for the primary."""
    if "reference_body" not in cells.names:
        return np.full(len(cells.lines), "")
    names = read_texts(cells, issues, "reference_body", required=False)
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


def _instruments(cells: Cells, issues: Issues) -> np.ndarray:
    if "instrument" not in cells.names:
        return np.full(len(cells.lines), "")
    return read_texts(cells, issues, "instrument", required=False)


def _settle(issues: list[RowIssue], options: Options, rejected: list) -> None:
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


def _without_duplicates(rows: dict | None, group: str, options: Options,
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
        issues.append(RowIssue(str(rows["file"][row]), int(rows["line"][row]), None,
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
