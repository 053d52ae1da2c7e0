"""Schedules of epochs: when, how precise, seen from how far (read from a file or given)."""
from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.time import Time

from massfit.errors import ConfigError, InputError
from massfit.read.cells import Issues, Options, read_numbers, read_texts
from massfit.read.text import split_file
from massfit.read.time_column import read_times
from massfit.read.timescales import quiet_leap_seconds, tdb_jd


@dataclass
class Schedule:
    """Observation epochs with their expected errors.

    Parameters
    ----------
    time : astropy.time.Time
        One entry per epoch.
    error : Quantity
        The expected 1-sigma error of each of east and north at each epoch (an angle,
        or a length for offsets in length units).
    bodies : list of tuple or None
        The companions observed at each epoch; None means every companion.
    distance : Quantity or None
        Distance from the observer at each epoch (moons of a planet), else None.
    source : str
        Where the epochs came from (a file name, or a description), for messages.
    lines : ndarray or None
        The file line of each epoch, for messages.
    """

    time: Time
    error: u.Quantity
    bodies: list | None = None
    distance: u.Quantity | None = None
    source: str = "<schedule>"
    lines: np.ndarray | None = None

    def __post_init__(self):
        n = len(self.time)
        err = u.Quantity(self.error)
        self.error = u.Quantity(np.broadcast_to(err.value, (n,)).copy(), err.unit)
        with quiet_leap_seconds():  # a second is far below any planned cadence
            #: JD (TDB) and ISO UTC of each epoch, converted once.
            self.tdb_jd = np.atleast_1d(self.time.tdb.jd).astype(float)
            self.utc_isot = np.atleast_1d(self.time.utc.isot).astype(str)
        if self.error.unit.physical_type not in ("angle", "length"):
            raise ConfigError(f"an expected error is an angle (mas) or a length (km, au), "
                              f"not '{self.error.unit}'", key=self.source)
        if np.any(~np.isfinite(self.error.value)) or np.any(self.error.value <= 0):
            bad = int(np.flatnonzero(~(self.error.value > 0))[0])
            raise InputError("expected errors must be positive and finite",
                             file=self.source, line=self._line(bad), column="error")
        if self.lines is None:
            self.lines = np.arange(1, n + 1)

    def __len__(self) -> int:
        return len(self.time)

    def _line(self, k):
        return None if self.lines is None else int(self.lines[k])

    @classmethod
    def every(cls, start, stop, step, error, *, time_format=None, time_scale=None,
              bodies=None, key_prefix="--") -> "Schedule":
        """Evenly spaced epochs from ``start`` to ``stop`` (inclusive) every ``step``.

        Parameters
        ----------
        start, stop : Time or str
            Strings are read with ``time_format`` (default: ISO) and ``time_scale``,
            which is required: massfit never guesses a time scale.
        step : Quantity or str
            The cadence, e.g. ``"30 d"``.
        error : Quantity or str
            The expected 1-sigma error of each of east and north.
        key_prefix : str
            Prefix of the option or config key named in error messages.
        """
        from massfit.quantities import parse_quantity

        t0 = parse_time(start, time_format, time_scale, key=f"{key_prefix}start")
        t1 = parse_time(stop, time_format, time_scale, key=f"{key_prefix}stop")
        dt = parse_quantity(step, expect=u.day, key=f"{key_prefix}every").to_value(u.day)
        if dt <= 0:
            raise ConfigError("the cadence must be positive", key=f"{key_prefix}every")
        span = float(tdb_jd(t1) - tdb_jd(t0))
        if span < 0:
            raise ConfigError("the schedule stops before it starts", key=f"{key_prefix}stop")
        n = int(math.floor(span / dt + 1e-9)) + 1
        if n > 20000:
            raise ConfigError(f"{n} epochs is more than the planner takes (20000); "
                              f"choose a longer cadence", key=f"{key_prefix}every")
        with quiet_leap_seconds():
            times = t0 + np.arange(n) * dt * u.day
        err = _error_quantity(error, f"{key_prefix}error")
        schedule = cls(times, err, bodies=bodies)
        schedule.source = (f"epochs every {dt:g} d from {schedule.utc_isot[0][:19]} to "
                           f"{schedule.utc_isot[-1][:19]} UTC")
        return schedule

    @classmethod
    def read(cls, path, *, error=None, time_format=None, time_scale=None,
             error_unit=None) -> "Schedule":
        """Read epochs from a CSV or ECSV table.

        Columns: ``time``; ``error`` (or ``east_err`` and ``north_err``, the larger
        being used) unless ``error`` is given for all; optional ``body`` (the
        companion observed; rows with the same time form one epoch) and ``distance``.
        ECSV states its units and times in its header; a plain CSV needs
        ``time_format``, ``time_scale`` and ``error_unit``.
        """
        return _read_schedule(Path(path), error, time_format, time_scale, error_unit)

    def select(self, index) -> "Schedule":
        """The epochs at ``index`` (in that order)."""
        index = np.asarray(index, dtype=int)
        return Schedule(self.time[index], self.error[index],
                        bodies=(None if self.bodies is None
                                else [self.bodies[k] for k in index]),
                        distance=None if self.distance is None else self.distance[index],
                        source=self.source, lines=self.lines[index])

    def join(self, other: "Schedule") -> "Schedule":
        """This schedule followed by ``other``."""
        if len(self) == 0:
            return other
        if len(other) == 0:
            return self
        unit = self.error.unit
        if not other.error.unit.is_equivalent(unit):
            raise ConfigError("the schedules' errors mix angles and lengths",
                              key=other.source)
        bodies = None
        if self.bodies is not None or other.bodies is not None:
            bodies = ((self.bodies or [None] * len(self))
                      + (other.bodies or [None] * len(other)))
        distance = None
        if self.distance is not None or other.distance is not None:
            distance = np.concatenate([distance_pc(s) for s in (self, other)]) * u.pc
        return Schedule(Time(np.concatenate([self.tdb_jd, other.tdb_jd]),
                             format="jd", scale="tdb"),
                        np.concatenate([self.error.value, other.error.to_value(unit)]) * unit,
                        bodies=bodies, distance=distance, source=self.source,
                        lines=np.concatenate([self.lines, other.lines]))


def distance_pc(schedule):
    if schedule.distance is None:
        return np.full(len(schedule), np.nan)
    return schedule.distance.to_value(u.pc)


def empty_schedule(unit) -> Schedule:
    return Schedule(Time(np.zeros(0), format="jd", scale="tdb"), np.zeros(0) * unit,
                    source="no epochs")


# =============================================================== schedule files
def parse_time(value, time_format, time_scale, *, key):
    if isinstance(value, Time):
        return value
    if time_scale is None:
        raise ConfigError("say which time scale the times are in (utc, tt, tdb, ...); "
                          "massfit never guesses it", key=f"{key} (time scale)")
    fmt = time_format
    if fmt is None and not isinstance(value, str):
        raise ConfigError(f"the time {value!r} is a number: give its format (jd, mjd, "
                          f"jyear, ...) or write it as an ISO date", key=key)
    try:
        with quiet_leap_seconds():
            return Time(value, format=fmt, scale=time_scale)
    except (ValueError, TypeError) as exc:
        raise ConfigError(f"cannot read the time {value!r} ({exc}); write an ISO date such "
                          f"as '2027-03-01T00:00:00' or give time_format", key=key) from None


def _error_quantity(value, key):
    from massfit.quantities import parse_quantity

    if value is None:
        raise ConfigError("give the expected 1-sigma error of each of east and north, "
                          "e.g. '0.5 mas'", key=key)
    q = u.Quantity(value) if isinstance(value, u.Quantity) else None
    if q is None:
        text = str(value)
        try:
            q = parse_quantity(text, expect=u.mas, key=key)
        except ConfigError:
            q = parse_quantity(text, expect=u.km, key=key)
    if q.unit.physical_type not in ("angle", "length"):
        raise ConfigError(f"'{value}' is neither an angle nor a length", key=key)
    return q


def _read_schedule(path, error, time_format, time_scale, error_unit):
    """A schedule file read through the observation reader's own steps.

    The file is split into cells and its times converted by :mod:`massfit.read` (the
    same CSV/ECSV rules, time formats and scales, and messages as for observations);
    every problem names the file, the line and the column.
    """
    if not path.is_file():
        raise InputError("no such schedule file", file=path)
    cells = split_file(str(path))
    if "time" not in cells.names:
        raise InputError("a schedule needs a 'time' column", file=path, column="time")
    options = Options(time_format=time_format, time_scale=time_scale, units={},
                      skip_bad_rows=False, primary="")
    issues = Issues(cells)
    jd1, jd2 = read_times(cells, options, issues)
    err = _table_errors(cells, issues, error, error_unit)
    bodies = None
    if "body" in cells.names:
        bodies = [(str(b),) for b in read_texts(cells, issues, "body", required=True)]
    distance = None
    if "distance" in cells.names:
        unit = _column_unit(cells, "distance", None, "a unit (pc, au)")
        distance = (_read_positive(cells, issues, "distance") * unit).to(u.pc)
    problems = issues.listed()
    if problems:
        raise problems[0].error()
    with quiet_leap_seconds():
        times = Time(jd1, jd2, format="jd", scale="tdb")
    schedule = Schedule(times, err, bodies=bodies, distance=distance, source=str(path),
                        lines=np.asarray(cells.lines, dtype=int))
    return _merge_epochs(schedule) if bodies is not None else schedule


def _column_unit(cells, name, fallback, what):
    stated = cells.units.get(name)
    unit = stated if stated is not None else fallback
    if unit is None:
        raise InputError(f"the {name} column needs {what}", file=cells.file, column=name)
    try:
        return u.Unit(unit)
    except ValueError:
        raise InputError(f"{unit!r} is not a unit", file=cells.file, column=name) from None


def _read_positive(cells, issues, name):
    """A column's values, each checked to be a positive finite number."""
    values = read_numbers(cells, issues, name, 1.0)
    for row in np.flatnonzero(np.isfinite(values) & ~(values > 0)):
        issues.add(row, name, "must be a positive number")
    return values


def _table_errors(cells, issues, error, error_unit):
    names = [c for c in ("error", "east_err", "north_err") if c in cells.names]
    if not names:
        if error is None:
            raise InputError("give an 'error' column or one expected error for all epochs",
                             file=cells.file, column="error")
        return np.full(len(cells.lines), 1.0) * _error_quantity(error, "--error")
    values = []
    for name in names:
        unit = _column_unit(cells, name, error_unit, "a unit (an ECSV unit, or the "
                            "error-unit option for a plain CSV)")
        values.append(u.Quantity(_read_positive(cells, issues, name), unit))
    unit = values[0].unit
    # Only one error per coordinate is planned with; the larger is the cautious one.
    return np.max(np.vstack([v.to_value(unit) for v in values]), axis=0) * unit


def _merge_epochs(schedule):
    """Rows of one time (to the second) become one epoch observing several bodies."""
    keys = np.round(schedule.tdb_jd * 86400.0)
    order = list(dict.fromkeys(keys.tolist()))
    index = []
    bodies = []
    for key in order:
        rows = np.flatnonzero(keys == key)
        errs = schedule.error[rows]
        if np.ptp(errs.value) > 0:
            raise InputError("rows of one epoch give different errors; give one per epoch",
                             file=schedule.source, line=int(schedule.lines[rows[1]]),
                             column="error")
        index.append(rows[0])
        bodies.append(tuple(dict.fromkeys(b for k in rows for b in schedule.bodies[k])))
    merged = schedule.select(index)
    merged.bodies = bodies
    return merged


# ======================================================= simulated observations
def epoch_rows(names, schedule: Schedule, what="the assumed system"):
    """One row per (epoch, observed companion): the epoch index and the body name."""
    names = list(names)
    epoch, body = [], []
    for k in range(len(schedule)):
        seen = names if schedule.bodies is None or schedule.bodies[k] is None \
            else schedule.bodies[k]
        for name in seen:
            if name not in names:
                raise InputError(f"the schedule names a body '{name}' that {what} does "
                                 f"not have (it has {', '.join(names)})",
                                 file=schedule.source, line=int(schedule.lines[k]),
                                 column="body")
            epoch.append(k)
            body.append(name)
    return np.array(epoch, dtype=int), np.array(body, dtype=str)
