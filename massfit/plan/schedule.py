"""Schedules of epochs: when, how precise, seen from how far (read from a file or given)."""
from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table
from astropy.time import Time

from massfit.errors import ConfigError, InputError
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
        from massfit.constants import parse_quantity

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
    from massfit.constants import parse_quantity

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


def _data_lines(path):
    """Physical line numbers of the data rows (after the header) of a CSV/ECSV file."""
    lines = path.read_text(encoding="utf-8", errors="replace").splitlines()
    data = [k + 1 for k, line in enumerate(lines)
            if line.strip() and not line.lstrip().startswith("#")]
    return np.array(data[1:], dtype=int)


def _read_schedule(path, error, time_format, time_scale, error_unit):
    if not path.is_file():
        raise InputError("no such schedule file", file=path)
    fmt = "ascii.ecsv" if path.suffix.lower() == ".ecsv" else "ascii.csv"
    try:
        table = Table.read(path, format=fmt)
    except Exception as exc:  # astropy raises many kinds for a malformed table
        raise InputError(f"cannot read it as {'ECSV' if fmt == 'ascii.ecsv' else 'CSV'} "
                         f"({exc})", file=path) from None
    lines = _data_lines(path)
    if len(lines) != len(table):
        lines = np.arange(1, len(table) + 1)
    if len(table) == 0:
        raise InputError("the schedule has no rows", file=path)
    if "time" not in table.colnames:
        raise InputError("a schedule needs a 'time' column", file=path, column="time")
    times = _table_times(table, path, time_format, time_scale, lines)
    err = _table_errors(table, path, error, error_unit, lines)
    bodies = None
    if "body" in table.colnames:
        bodies = [(str(b),) for b in table["body"]]
    distance = None
    if "distance" in table.colnames:
        col = table["distance"]
        if col.unit is None:
            raise InputError("the distance column needs a unit (pc, au)", file=path,
                             column="distance")
        distance = u.Quantity(col).to(u.pc)
        bad = np.flatnonzero(~(distance.value > 0))
        if bad.size:
            raise InputError("a distance must be positive", file=path,
                             line=int(lines[bad[0]]), column="distance")
    schedule = Schedule(times, err, bodies=bodies, distance=distance, source=str(path),
                        lines=lines)
    return _merge_epochs(schedule) if bodies is not None else schedule


def _table_times(table, path, time_format, time_scale, lines):
    col = table["time"]
    if isinstance(col, Time):
        return col
    fmt = time_format or table.meta.get("time_format")
    scale = time_scale or table.meta.get("time_scale")
    if fmt is None or scale is None:
        raise InputError("the times need a format and a scale: use a native ECSV Time "
                         "column, the table meta keys time_format and time_scale, or "
                         "the time format and scale options", file=path, column="time")
    values = np.asarray(col)
    try:
        return Time(values, format=fmt, scale=scale)
    except (ValueError, TypeError):
        for k, value in enumerate(values):
            try:
                Time(value, format=fmt, scale=scale)
            except (ValueError, TypeError):
                raise InputError(f"{value!r} is not a time in format '{fmt}'", file=path,
                                 line=int(lines[k]), column="time") from None
        raise InputError(f"the times are not in format '{fmt}'", file=path,
                         column="time") from None


def _table_errors(table, path, error, error_unit, lines):
    names = [c for c in ("error", "east_err", "north_err") if c in table.colnames]
    if not names:
        if error is None:
            raise InputError("give an 'error' column or one expected error for all epochs",
                             file=path, column="error")
        return np.full(len(table), 1.0) * _error_quantity(error, "--error")
    values = []
    for name in names:
        col = table[name]
        unit = col.unit if col.unit is not None else (
            u.Unit(error_unit) if error_unit else None)
        if unit is None:
            raise InputError("the error column needs a unit (an ECSV unit, or the "
                             "error-unit option for a plain CSV)", file=path, column=name)
        data = np.ma.filled(np.ma.asarray(col, dtype=float), np.nan)
        bad = np.flatnonzero(~(data > 0))
        if bad.size:
            raise InputError("an expected error must be a positive number", file=path,
                             line=int(lines[bad[0]]), column=name)
        values.append(u.Quantity(data, unit))
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
