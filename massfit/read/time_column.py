"""The time column: its stated format and scale, and every row's date as TDB Julian days."""
from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from astropy.time import Time
from astropy.time.formats import TimeNumeric, TimeString

from massfit.errors import InputError
from massfit.read.cells import Cells, Issues, Options, cells_of_column, is_empty_cell, quoted

# Formats whose values can be written as text or numbers in a table cell; datetime64
# is a string format in astropy but accepts only numpy datetime64 values.
TIME_FORMATS = tuple(name for name, cls in Time.FORMATS.items()
                      if issubclass(cls, (TimeNumeric, TimeString)) and name != "datetime64")


# 'local' times have no relation to any other scale, so they cannot become TDB.
TIME_SCALES = tuple(scale for scale in Time.SCALES if scale != "local")


def name_problem(value: Any, accepted: tuple[str, ...]) -> str | None:
    if isinstance(value, str) and value in accepted:
        return None
    return f"{value!r} is not one of the accepted names: {', '.join(accepted)}"


def read_times(cells: Cells, options: Options, issues: Issues) -> tuple[np.ndarray, np.ndarray]:
    """TDB Julian dates (two parts) of each row; NaN where the time cannot be used."""
    if cells.native_time is not None:
        native = _native_time(cells)
        masked = np.broadcast_to(np.asarray(getattr(native, "mask", False)), native.shape)
        return _tdb_dates(lambda rows: native[rows], masked, issues,
                          lambda row: "cannot be converted to TDB")
    time_format = _stated(cells, "time_format", options.time_format, TIME_FORMATS)
    time_scale = _stated(cells, "time_scale", options.time_scale, TIME_SCALES)
    raw = cells_of_column(cells, "time")
    masked = np.array([is_empty_cell(cell) for cell in raw], dtype=bool)
    return _tdb_dates(
        lambda rows: Time([raw[row] for row in rows], format=time_format, scale=time_scale),
        masked, issues,
        lambda row: f"{quoted(raw[row])} is not a valid time in format '{time_format}' "
                    f"and scale '{time_scale}'")


def stated_time_form(cells: Cells, options: Options) -> dict:
    """The time column's format and scale as the file (or the options) state them.

    Figures and tables write times back in this form; None where the file states none
    that massfit accepted (the read then refuses the file anyway).
    """
    if cells.native_time is not None:
        return {"time_format": str(cells.native_time.format),
                "time_scale": str(cells.native_time.scale)}
    out = {}
    for key, fallback in (("time_format", options.time_format),
                          ("time_scale", options.time_scale)):
        value = cells.meta.get(key, fallback)
        out[key] = value if isinstance(value, str) else None
    return out


_J2000_JD = 2451545.0


#: Times further than this from J2000 are refused: their spans would make nonsense of
#: the period search (periods up to 1e9 d), and no observation is that old.
_TIME_RANGE_DAYS = 1e8


def _native_time(cells: Cells) -> Time:
    native = cells.native_time
    if native.ndim != 1:
        raise InputError("must hold one time per row", file=cells.file, column="time")
    # A file that says two different things about its times is refused, not resolved.
    for key, attribute in (("time_format", "format"), ("time_scale", "scale")):
        stated = cells.meta.get(key, getattr(native, attribute))
        if not isinstance(stated, str) or stated != getattr(native, attribute):
            raise InputError(f"is an astropy Time column with {attribute} "
                             f"'{getattr(native, attribute)}', but the table meta key `{key}` "
                             f"says {quoted(stated)}", file=cells.file, column="time")
    return native


def _stated(cells: Cells, key: str, fallback: str | None, accepted: tuple[str, ...]) -> str:
    """The time format or scale a file states, else the option's, else refuse."""
    if key in cells.meta:
        problem = name_problem(cells.meta[key], accepted)
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


def _tdb_dates(make: Callable[[list[int]], Time], masked: np.ndarray, issues: Issues,
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


def _converted(make, rows: list[int], issues: Issues, why) -> list[tuple[list[int], Time]]:
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
