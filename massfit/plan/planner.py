"""Planning observations: forecast the central mass's precision and choose next epochs.

Two sources of knowledge about the system:

*An assumed system* (:class:`AssumedSystem`: central mass, parallax and each
companion's elements). The forecast is the Fisher matrix at the assumed elements: the
numerical Jacobian of the model's whitened residuals with respect to its sampled
coordinates, ``F = J^T J``, plus the information of every Gaussian prior (the
parallax, most often). The variance of the central mass is the inverse of its Schur
complement, so every other parameter is marginalised. Because each epoch adds its own
``J_k^T J_k``, a schedule's information is the sum over its epochs, and the greedy
choice of next epochs is exact within the Gaussian approximation.

*A finished fit* (its output folder; the posterior samples in ``samples.ecsv``). The
posterior already holds the data, so the planner uses the samples themselves: the
spread of each candidate epoch's predicted offsets over the posterior and their
covariance with ln GM. Conditioning that ensemble linearly on a new measurement with
the stated error (the update a Gaussian posterior would get) gives the expected
variance of ln GM after it; the ensemble is then updated and the next epoch chosen.

Both report the relative 1-sigma of GM (what the data fix) and of the mass in kg
(which also carries the uncertainty of G, about 2.2e-5).

The forecast of an assumed system can be checked by simulating the schedule at the
assumed elements, fitting it with :func:`massfit.fit` (a short chain) and comparing
the posterior width with the forecast.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table
from astropy.time import Time

from massfit.constants import G_REL_UNCERTAINTY, GM_SUN_KM3_S2, LIGHT_DAYS_PER_PC
from massfit.errors import ConfigError, InputError, ModelError
from massfit.model.orbit_model import OrbitModel, SystemSpec
from massfit.read.observations import AstrometryData, Observations
from massfit.priors import Fixed, Normal
from massfit.sample.chain import check_seed
from massfit.read.timescales import quiet_leap_seconds, tdb_jd

__all__ = ["AssumedSystem", "Schedule", "Posterior", "PlanResult", "forecast_precision",
           "plan_observations", "read_posterior"]

LN10 = math.log(10.0)
#: Relative Fisher variance below which the mass counts as not determined by the data.
_SINGULAR = 1e-10
#: Relative sigma above which a Gaussian forecast is flagged as only indicative
#: (common practice: a linearised error above ~30 % no longer describes the posterior).
_GAUSSIAN_LIMIT = 0.3
#: Posterior samples used by the ensemble update (enough for a 1 % covariance).
_ENSEMBLE_SIZE = 4000


# ===================================================================== inputs
@dataclass
class AssumedSystem:
    """The system a plan assumes.

    Parameters
    ----------
    central_mass : Quantity
        The central mass (any mass unit, ``M_sun`` meaning the nominal GM_sun / G).
    companions : dict
        name -> dict with ``period`` (d), ``ecc``, ``inc``, ``omega``, ``node`` (deg),
        ``periapsis_time`` (astropy Time) and optional ``mass`` (Quantity, default 0).
    parallax : Quantity, optional
        The system's parallax; needed for angular errors without a per-epoch distance.
    parallax_err : Quantity, optional
        Its 1-sigma error: a Gaussian prior, counted as information. Without it the
        parallax is held fixed.
    """

    central_mass: u.Quantity
    companions: dict
    parallax: u.Quantity | None = None
    parallax_err: u.Quantity | None = None

    def mass_msun(self) -> float:
        """Central mass in nominal solar masses."""
        return _to_msun(self.central_mass, "assumed.central_mass")

    def spec(self, *, measured_parallax=None) -> SystemSpec:
        """The model's assumptions: default priors, the parallax, fixed companion masses.

        ``measured_parallax`` (mas) replaces the centre of the parallax's Gaussian
        prior: a simulated fit draws it about the true value, as a real measurement
        of the parallax would scatter.
        """
        from massfit.model.orbit_model import CompanionSpec

        plx = None
        if self.parallax is not None:
            value = float(self.parallax.to_value(u.mas))
            if measured_parallax is not None and self.parallax_err is not None:
                value = float(measured_parallax)
            plx = (Fixed(value) if self.parallax_err is None else
                   Normal(value, float(self.parallax_err.to_value(u.mas)), low=0.0))
        comps = {name: CompanionSpec(name, mass=Fixed(self._companion_mass(name)))
                 for name in self.companions}
        return SystemSpec(parallax=plx, companions=comps, strict_companions=True)

    def simulated_spec(self, seed) -> SystemSpec:
        """The assumptions of a simulated fit: the parallax prior is centred on a
        measurement drawn about the true parallax (seeded), not on the truth itself,
        as a real measurement would scatter."""
        if self.parallax is None or self.parallax_err is None:
            return self.spec()
        rng = np.random.default_rng([seed, 1])
        return self.spec(measured_parallax=float(rng.normal(
            self.parallax.to_value(u.mas), self.parallax_err.to_value(u.mas))))

    def _companion_mass(self, name) -> float:
        mass = self.companions[name].get("mass")
        return 0.0 if mass is None else _to_msun(mass, f"assumed.companions.{name}.mass")

    def physical(self, model: OrbitModel) -> dict:
        """The assumed values in the form :meth:`OrbitModel.from_physical` takes."""
        values = {"central_mass": self.mass_msun(),
                  "parallax": None if self.parallax is None else
                  float(self.parallax.to_value(u.mas))}
        for name, el in self.companions.items():
            period = float(el["period"])
            t_ref = model.epoch_jd + model.reference_epoch(name)
            mean_ref = 2 * np.pi * (t_ref - tdb_jd(el["periapsis_time"])) / period
            values[name] = {"period": period, "ecc": float(el["ecc"]),
                            "omega": math.radians(el["omega"]),
                            "inc": math.radians(el["inc"]),
                            "node": math.radians(el["node"]),
                            "mean_anomaly_ref": float(mean_ref),
                            "mass": self._companion_mass(name)}
        return values

    def positions(self, names, t_jd, distance_pc, *, length=False, light_time=True):
        """Noise-free offsets of ``names`` at ``t_jd`` (JD, TDB).

        Arcsec through the per-row distance (pc) where it is finite, else through the
        parallax; au where ``length`` is true.
        """
        from massfit.scenarios.simulate import orbit_au

        names = np.asarray(names)
        east = np.empty(names.size)
        north = np.empty(names.size)
        for name in dict.fromkeys(names.tolist()):
            rows = names == name
            el = dict(self.companions[name], mass=self._companion_mass(name),
                      periapsis_time=tdb_jd(self.companions[name]["periapsis_time"]))
            t = t_jd[rows]
            d = distance_pc[rows]
            has_d = np.isfinite(d) & (not length)
            if light_time:
                t = t - np.where(has_d, d * LIGHT_DAYS_PER_PC, 0.0)
            e_au, n_au, _, _, _ = orbit_au(el, t, self.mass_msun())
            if length:
                scale = np.ones(t.size)
            else:
                plx = np.nan if self.parallax is None else float(
                    self.parallax.to_value(u.arcsec))
                scale = np.where(has_d, 1.0 / np.where(has_d, d, 1.0), plx)
            east[rows] = e_au * scale
            north[rows] = n_au * scale
        return east, north


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
            distance = np.concatenate([_distance_pc(s) for s in (self, other)]) * u.pc
        return Schedule(Time(np.concatenate([self.tdb_jd, other.tdb_jd]),
                             format="jd", scale="tdb"),
                        np.concatenate([self.error.value, other.error.to_value(unit)]) * unit,
                        bodies=bodies, distance=distance, source=self.source,
                        lines=np.concatenate([self.lines, other.lines]))


def _distance_pc(schedule):
    if schedule.distance is None:
        return np.full(len(schedule), np.nan)
    return schedule.distance.to_value(u.pc)


def _empty_schedule(unit) -> Schedule:
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
def _rows(names, schedule: Schedule, what="the assumed system"):
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


def simulated_observations(system: AssumedSystem, schedule: Schedule, *, seed=None,
                           noise=True) -> Observations:
    """Observations of ``schedule`` simulated at the assumed elements.

    Parameters
    ----------
    system : AssumedSystem
    schedule : Schedule
    seed : int, optional
        Seed of the Gaussian noise.
    noise : bool
        Add noise with the schedule's errors (False: the exact model offsets).

    Returns
    -------
    Observations
    """
    epoch, body = _rows(system.companions, schedule)
    n = len(epoch)
    t_jd = schedule.tdb_jd[epoch]
    distance = _distance_pc(schedule)[epoch]
    unit = schedule.error.unit
    length = unit.physical_type == "length"
    if not length and system.parallax is None and np.any(~np.isfinite(distance)):
        raise ConfigError("angular errors need the system's parallax (or a distance per "
                          "epoch); give the parallax, or errors in a length unit",
                          key="assumed.parallax")
    east, north = system.positions(body, t_jd, distance, length=length)
    if length:
        distance = np.full(n, np.nan)  # offsets in au need no distance
    err = schedule.error[epoch].to_value(u.au if length else u.arcsec)
    if noise:
        rng = np.random.default_rng(seed)
        east = east + err * rng.standard_normal(n)
        north = north + err * rng.standard_normal(n)
    nan = np.full(n, np.nan)
    data = AstrometryData(
        body=body, time=Time(t_jd, format="jd", scale="tdb"), polar=np.zeros(n, bool),
        east=east, north=north, east_err=err.copy(), north_err=err.copy(),
        corr=np.zeros(n), sep=nan, sep_err=nan.copy(), pa=nan.copy(), pa_err=nan.copy(),
        length=np.full(n, length), distance=distance,
        file=np.full(n, schedule.source), line=np.asarray(schedule.lines)[epoch])
    return Observations(astrometry=data, files=[schedule.source], rows_read=n)


# ================================================================ Fisher forecast
class _FisherInformation:
    """Per-epoch Fisher blocks of one schedule at the assumed elements.

    Attributes
    ----------
    blocks : ndarray, shape (n_epochs, n_dim, n_dim)
        ``J_k^T J_k`` of each epoch, in the sampled coordinates of one model.
    prior : ndarray, shape (n_dim, n_dim)
        Information of the Gaussian priors.
    k_mass : int
        Index of ``central.log10_mass``.
    """

    def __init__(self, system: AssumedSystem, schedule: Schedule):
        if len(schedule) == 0:
            raise ConfigError("the schedule has no epochs", key=schedule.source)
        self.model = OrbitModel(simulated_observations(system, schedule, noise=False),
                                system.spec(), distinct_epochs=False)
        values = system.physical(self.model)
        self.theta = self.model.recentre(self.model.from_physical(values))
        if "central.log10_mass" not in self.model.names:
            raise ModelError("the central mass is fixed; there is nothing to forecast")
        self.k_mass = self.model.names.index("central.log10_mass")
        jac = _jacobian(self.model, self.theta)
        epoch, _ = _rows(system.companions, schedule)
        owner = epoch[_residual_rows(self.model, jac.shape[0])]
        n_dim = self.model.n_dim
        self.blocks = np.zeros((len(schedule), n_dim, n_dim))
        for k in range(len(schedule)):
            cols = jac[owner == k]
            self.blocks[k] = cols.T @ cols
        self.prior = _prior_information(self.model, self.theta)

    def variance(self, chosen, *, ridge=None) -> float:
        """Variance of ln M from the epochs ``chosen`` (inf where not determined)."""
        info = self.prior + self.blocks[np.asarray(chosen, dtype=int)].sum(axis=0)
        if ridge is not None:
            info = info + ridge
        return _ln_mass_variance(info, self.k_mass)

    def trial_variances(self, chosen, candidates, *, ridge=None) -> np.ndarray:
        """Variance of ln M after adding each of ``candidates`` to ``chosen``."""
        base = self.prior + self.blocks[np.asarray(chosen, dtype=int)].sum(axis=0)
        if ridge is not None:
            base = base + ridge
        return np.array([_ln_mass_variance(base + self.blocks[c], self.k_mass)
                         for c in candidates])

    def ridge(self) -> np.ndarray:
        """A weak prior for choosing epochs where the data alone leave the mass undetermined.

        Widths of several units in every sampled coordinate (3 dex in mass and
        period, the whole unit disc in sqrt(e) cos w, sqrt(e) sin w and cos i, pi in
        angles, the parallax's own value): far broader than any data constrain, so
        the chosen epochs are those that the data favour.
        """
        widths = []
        for param, value in zip(self.model.parameters, self.theta):
            if param.transform == "log10":
                widths.append(3.0)
            elif param.transform in ("disc", "cos"):
                widths.append(1.0)
            elif param.transform == "identity":
                widths.append(max(abs(value), 1e-12))
            else:
                widths.append(np.pi)
        return np.diag(1.0 / np.square(widths))


def _jacobian(model, theta):
    """Central-difference Jacobian of the whitened residuals, shape (n_res, n_dim)."""
    n_dim = theta.size
    step = 1e-6 * np.maximum(1.0, np.abs(theta))
    points = np.vstack([theta + np.diag(step), theta - np.diag(step)])
    res = model.residuals(points)
    jac = (res[:n_dim] - res[n_dim:]) / (2.0 * step[:, None])
    if not np.all(np.isfinite(jac)):
        raise ModelError("the model cannot be evaluated near the assumed elements "
                         "(check the eccentricity and inclination)")
    return jac.T


def _residual_rows(model, width):
    """Observation row of each of the ``width`` whitened residual columns."""
    parts = []
    for rows in model.rows.values():
        cart = rows.index[rows.cart]
        polar = rows.index[rows.polar]
        parts.extend([cart, cart, polar, polar])
    owner = np.concatenate(parts)
    if owner.size != width:
        raise RuntimeError("the model's residual layout is not the one the planner knows "
                           f"({width} residuals for {owner.size} astrometric columns)")
    return owner


def _prior_information(model, theta):
    """Fisher information of the Gaussian priors, in the sampled coordinates."""
    info = np.zeros((model.n_dim, model.n_dim))
    for k, param in enumerate(model.parameters):
        if not isinstance(param.prior, Normal):
            continue
        u_k = theta[k]
        if param.transform == "identity":
            slope = 1.0
        elif param.transform == "log10":
            slope = 10.0 ** u_k * LN10
        elif param.transform == "cos":
            slope = 1.0 / max(math.sqrt(max(1.0 - u_k * u_k, 0.0)), 1e-12)
        else:  # a normal prior on e is not a Gaussian in sqrt(e) cos w: left out
            continue
        info[k, k] += (slope / param.prior.sd) ** 2
    return info


def _ln_mass_variance(info, k):
    """Variance of ln M (= ln10^2 var log10 M) from the Schur complement of ``info``."""
    f_kk = info[k, k]
    if not f_kk > 0:
        return math.inf
    rest = np.delete(np.arange(info.shape[0]), k)
    f_rr = info[np.ix_(rest, rest)]
    f_rk = info[rest, k]
    scale = np.sqrt(np.clip(np.diag(f_rr), 1e-300, None))
    normed = f_rr / np.outer(scale, scale)
    solved = np.linalg.pinv(normed, rcond=1e-12, hermitian=True) @ (f_rk / scale)
    schur = f_kk - float((f_rk / scale) @ solved)
    if not schur > _SINGULAR * f_kk:
        return math.inf
    return LN10 ** 2 / schur


def forecast_precision(system: AssumedSystem, schedule: Schedule) -> dict:
    """Fisher forecast of the central mass's precision for one schedule.

    Parameters
    ----------
    system : AssumedSystem
        The assumed elements (the forecast is evaluated there).
    schedule : Schedule
        Epochs and their expected errors.

    Returns
    -------
    dict
        ``gm_relative_sigma`` (1-sigma of GM over GM), ``mass_relative_sigma`` (of the
        mass in kg, including G's uncertainty), ``mass_sigma`` (Quantity in the
        central mass's unit), ``epochs`` and ``determined`` (False where the schedule
        leaves the mass undetermined; the sigmas are then inf).
    """
    info = _FisherInformation(system, schedule)
    return _precision_block(info.variance(np.arange(len(schedule))), system.central_mass,
                            len(schedule))


def _precision_block(variance, mass, epochs):
    rel = math.sqrt(variance) if math.isfinite(variance) else math.inf
    return {"epochs": int(epochs), "determined": bool(math.isfinite(rel)),
            "gm_relative_sigma": rel,
            "mass_relative_sigma": math.hypot(rel, G_REL_UNCERTAINTY),
            "mass_sigma": rel * mass}


# ============================================================ posterior ensemble
@dataclass
class Posterior:
    """Posterior samples of a finished fit, as physical elements.

    Attributes
    ----------
    gm : ndarray
        Central GM, km^3/s^2.
    parallax : ndarray or None
        mas.
    companions : dict
        name -> dict of arrays ``period`` (d), ``ecc``, ``inc``, ``omega``, ``node``
        (rad), ``periapsis_time`` (JD, TDB), ``semi_major_axis`` (au).
    source : str
    converged : bool or None
        What the fit said about its own convergence.
    dropped : int
        Samples left out because some element was not finite.
    """

    gm: np.ndarray
    parallax: np.ndarray | None
    companions: dict
    source: str = "<posterior>"
    converged: bool | None = None
    dropped: int = 0

    def central_mass(self) -> u.Quantity:
        """Median central mass (nominal M_sun, i.e. GM / GM_sun)."""
        return float(np.median(self.gm) / GM_SUN_KM3_S2) * u.M_sun

    def predicted(self, schedule: Schedule, *, light_time=True):
        """Predicted offsets at each row of the schedule for every sample.

        Returns
        -------
        rows : ndarray of int
            Epoch of each predicted row.
        east, north : ndarray, shape (n_samples, n_rows)
            In the unit of the schedule's errors.
        """
        from massfit.orbits import kepler

        names = list(self.companions)
        epoch, body = _rows(names, schedule, "the fit")
        unit = schedule.error.unit
        length = unit.physical_type == "length"
        distance = _distance_pc(schedule)[epoch]
        if not length and self.parallax is None and np.any(~np.isfinite(distance)):
            raise InputError("this fit has no parallax: give each candidate epoch its "
                             "distance (a 'distance' column), or errors in a length unit",
                             file=schedule.source, column="distance")
        t_jd = schedule.tdb_jd[epoch]
        n = self.gm.size
        east = np.empty((n, epoch.size))
        north = np.empty((n, epoch.size))
        for name in names:
            cols = np.flatnonzero(body == name)
            if cols.size == 0:
                continue
            el = {k: v[:, None] for k, v in self.companions[name].items()}
            t = t_jd[cols][None, :]
            d = distance[cols][None, :]
            if light_time and not length:
                t = t - np.where(np.isfinite(d), d * LIGHT_DAYS_PER_PC, 0.0)
            e_au, n_au, _ = kepler.relative_orbit(
                t, el["period"], el["ecc"], 0.0, el["semi_major_axis"], el["inc"],
                el["omega"], el["node"], t_ref=el["periapsis_time"])
            if length:
                scale = (1.0 * u.au).to_value(unit)
            else:
                arcsec_per_au = np.where(np.isfinite(d), 1.0 / np.where(np.isfinite(d), d, 1),
                                         np.nan if self.parallax is None else
                                         self.parallax[:, None] * 1e-3)
                scale = arcsec_per_au * (1.0 * u.arcsec).to_value(unit)
            east[:, cols] = e_au * scale
            north[:, cols] = n_au * scale
        return epoch, east, north


def read_posterior(folder) -> Posterior:
    """The posterior of a finished fit from its output folder (``samples.ecsv``).

    Parameters
    ----------
    folder : path
        A folder written by ``massfit fit`` or :meth:`FitResult.save`.

    Returns
    -------
    Posterior
    """
    folder = Path(folder)
    path = folder / "samples.ecsv"
    if not path.is_file():
        raise InputError("not a fit's output folder: it has no samples.ecsv", file=folder)
    try:
        table = Table.read(path, format="ascii.ecsv")
    except Exception as exc:  # astropy raises many kinds for a malformed table
        raise InputError(f"cannot read the posterior samples ({exc})", file=path) from None
    if "central_gm" not in table.colnames:
        raise InputError("the samples have no 'central_gm' column", file=path,
                         column="central_gm")
    names = [c[:-len(".periapsis_time")] for c in table.colnames
             if c.endswith(".periapsis_time")]
    if not names:
        raise InputError("the samples have no companion elements", file=path)
    need = {"period": 1.0, "eccentricity": 1.0, "inclination": "deg",
            "periapsis_argument": "deg", "ascending_node": "deg",
            "periapsis_time": 1.0, "semi_major_axis": 1.0}
    keys = {"period": "period", "eccentricity": "ecc", "inclination": "inc",
            "periapsis_argument": "omega", "ascending_node": "node",
            "periapsis_time": "periapsis_time", "semi_major_axis": "semi_major_axis"}
    companions = {}
    for name in names:
        orbit = {}
        for column, kind in need.items():
            full = f"{name}.{column}"
            if full not in table.colnames:
                raise InputError("a companion's elements are incomplete", file=path,
                                 column=full)
            values = np.asarray(table[full], dtype=float)
            orbit[keys[column]] = np.radians(values) if kind == "deg" else values
        companions[name] = orbit
    gm = np.asarray(table["central_gm"], dtype=float)
    good = np.isfinite(gm)
    for orbit in companions.values():
        for values in orbit.values():
            good &= np.isfinite(values)
    parallax = None
    if "parallax" in table.colnames:
        parallax = np.asarray(table["parallax"], dtype=float)
        good &= np.isfinite(parallax)
    if good.sum() < 100:
        raise InputError(f"only {int(good.sum())} usable posterior samples; the planner "
                         f"needs at least 100", file=path)
    companions = {name: {k: v[good] for k, v in orbit.items()}
                  for name, orbit in companions.items()}
    return Posterior(gm=gm[good], parallax=None if parallax is None else parallax[good],
                     companions=companions, source=str(folder),
                     converged=table.meta.get("converged"), dropped=int((~good).sum()))


class _EnsembleInformation:
    """The linear (Kalman) update of posterior samples by candidate epochs.

    Anomalies (samples minus their mean, over sqrt(n - 1)) of ln GM and of every
    candidate's predicted offsets, divided by the candidate's error, so that each
    measurement has unit noise. Conditioning on an epoch replaces the anomalies by
    ``(I + B B^T)^(-1/2) A`` with ``B`` the epoch's anomalies: a low-rank update.
    """

    def __init__(self, posterior: Posterior, schedule: Schedule, *, seed=0):
        rng = np.random.default_rng(seed)
        n = posterior.gm.size
        take = np.sort(rng.choice(n, _ENSEMBLE_SIZE, replace=False)) \
            if n > _ENSEMBLE_SIZE else np.arange(n)
        sub = Posterior(gm=posterior.gm[take],
                        parallax=None if posterior.parallax is None else
                        posterior.parallax[take],
                        companions={k: {q: v[take] for q, v in o.items()}
                                    for k, o in posterior.companions.items()},
                        source=posterior.source)
        epoch, east, north = sub.predicted(schedule)
        err = schedule.error.value[epoch]
        columns = np.hstack([np.log(sub.gm)[:, None], east / err, north / err])
        self.owner = np.concatenate([[-1], epoch, epoch])
        anomalies = columns - columns.mean(axis=0)
        self.anomalies = anomalies / math.sqrt(max(len(take) - 1, 1))
        self.spread = np.sqrt(np.var(east, axis=0) + np.var(north, axis=0))
        self.epoch_of_row = epoch
        self.n_epochs = len(schedule)
        self._cols = [np.flatnonzero(self.owner == k) for k in range(len(schedule))]

    def _conditioned(self, chosen):
        a = self.anomalies
        for k in chosen:
            b = a[:, self._cols[k]]
            u_, s, _ = np.linalg.svd(b, full_matrices=False)
            factor = 1.0 / np.sqrt(1.0 + s * s) - 1.0
            a = a + u_ @ (factor[:, None] * (u_.T @ a))
        return a

    def variance(self, chosen) -> float:
        a = self._conditioned(chosen)
        return float(a[:, 0] @ a[:, 0])

    def trial_variances(self, chosen, candidates) -> np.ndarray:
        a = self._conditioned(chosen)
        g = a[:, 0]
        out = np.empty(len(candidates))
        for j, k in enumerate(candidates):
            b = a[:, self._cols[k]]
            gram = b.T @ b + np.eye(b.shape[1])
            cross = b.T @ g
            out[j] = float(g @ g - cross @ np.linalg.solve(gram, cross))
        return out

    def spread_per_epoch(self) -> np.ndarray:
        """Largest predicted-offset spread (error's unit) among each epoch's rows."""
        out = np.zeros(self.n_epochs)
        np.maximum.at(out, self.epoch_of_row, self.spread)
        return out


# ===================================================================== planning
def _evenly_spaced(times_jd, n):
    """Indices of ``n`` candidates nearest to evenly spaced times across their span."""
    if n >= times_jd.size:
        return list(range(times_jd.size))
    targets = np.linspace(times_jd.min(), times_jd.max(), n) if n > 1 else \
        np.array([0.5 * (times_jd.min() + times_jd.max())])
    chosen = []
    for target in targets:
        dist = np.abs(times_jd - target)
        dist[chosen] = np.inf
        chosen.append(int(np.argmin(dist)))
    return sorted(chosen)


_METHOD_TEXT = {"fisher": "Fisher matrix at the assumed elements",
                "posterior": "linear update of the posterior samples"}


@dataclass
class PlanResult:
    """What the planner found.

    Attributes
    ----------
    method : str
        ``"fisher"`` (an assumed system) or ``"posterior"`` (a finished fit).
    central_mass : Quantity
        The assumed (or posterior median) central mass.
    current : dict
        The precision before any candidate epoch (the observed epochs, or the
        posterior): a block as :func:`forecast_precision` returns.
    all_candidates : dict
        The precision with every candidate epoch added.
    ranking : astropy.table.Table
        Every candidate epoch with the precision after adding it alone, the expected
        information gain and, for the chosen ones, their order.
    curve : astropy.table.Table
        Precision against the number of added epochs, chosen by the planner and
        evenly spaced.
    checks : list of dict
        Simulated fits that test the forecast (assumed systems only).
    notes : list of str
    """

    method: str
    central_mass: u.Quantity
    current: dict
    all_candidates: dict
    ranking: Table
    curve: Table
    checks: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    inputs: dict = field(default_factory=dict)

    # ------------------------------------------------------------------ text
    def report(self) -> str:
        """Text for a terminal, with a paragraph a proposal can quote."""
        unit = _mass_unit(self.central_mass)
        mass = self.central_mass.to_value(unit)
        lines = [f"Planning for a central mass of {mass:.6g} {unit} "
                 f"({_METHOD_TEXT[self.method]})"]
        lines.append(f"  now ({self.inputs.get('now', '')}): "
                     f"{_percent(self.current['gm_relative_sigma'])} of GM")
        lines.append(f"  with all {self.all_candidates['epochs'] - self.current['epochs']} "
                     f"candidate epochs: {_percent(self.all_candidates['gm_relative_sigma'])}")
        lines.append("")
        lines.append(f"Precision against the number of added epochs (1-sigma of GM):")
        lines.append(f"  {'n':>3}  {'planner':>10}  {'evenly spaced':>13}")
        for row in self.curve:
            lines.append(f"  {row['n_epochs']:>3}  {_percent(row['planned_gm_rel_sigma']):>10}"
                         f"  {_percent(row['even_gm_rel_sigma']):>13}")
        lines.append("")
        lines.append("Best next epochs (each alone added to what is in hand):")
        lines.append(f"  {'rank':>4}  {'time (UTC)':<19}  {'sigma after':>11}  "
                     f"{'shrink':>7}  {'gain [nat]':>10}  chosen")
        for row in self.ranking[:10]:
            chosen = "" if row["planned_order"] < 0 else f"#{row['planned_order']}"
            shrink = (f"{row['shrink_percent']:>6.2f}%" if np.isfinite(row["shrink_percent"])
                      else f"{'-':>7}")
            gain = (f"{row['information_gain']:>10.4f}" if np.isfinite(row["information_gain"])
                    else f"{'-':>10}")
            lines.append(f"  {row['rank']:>4}  {row['time_utc'][:19]:<19}  "
                         f"{_percent(row['gm_rel_sigma_after']):>11}  {shrink}  {gain}  "
                         f"{chosen}")
        if self.checks:
            lines.append("")
            lines.append("Check: simulated at the assumed elements and fitted (short chains):")
            for c in self.checks:
                lines.append(f"  {c['schedule']:<26} forecast "
                             f"{_percent(c['forecast_gm_rel_sigma'])}"
                             f", fit {_percent(c['fit_gm_rel_sigma'])} (ratio "
                             f"{c['ratio']:.2f}); true GM "
                             f"{'inside' if c['truth_inside_95'] else 'OUTSIDE'} the 95% "
                             f"interval; chain "
                             f"{'converged' if c['converged'] else 'NOT converged'}")
                if c.get("fit_chi2", 0) > 3 * c.get("values", np.inf):
                    lines.append(f"    the fit has chi2 = {c['fit_chi2']:.4g} for "
                                 f"{c['values']} values: it found another solution "
                                 f"(an alias?), so this schedule may not fix the orbit")
        lines.append("")
        lines.append(self.paragraph())
        wide = [row["n_epochs"] for row in self.curve
                if _GAUSSIAN_LIMIT < row["planned_gm_rel_sigma"] < np.inf]
        if wide or _GAUSSIAN_LIMIT < self.current["gm_relative_sigma"] < np.inf:
            lines.append(f"note: where sigma exceeds {100 * _GAUSSIAN_LIMIT:.0f} % the "
                         f"Gaussian forecast is only indicative: the data leave the orbit "
                         f"open and a fit may find several solutions")
        for note in self.notes:
            lines.append(f"note: {note}")
        return "\n".join(lines)

    def paragraph(self) -> str:
        """A plain paragraph stating the forecast, for a proposal."""
        unit = _mass_unit(self.central_mass)
        mass = self.central_mass.to_value(unit)
        best = self.curve[-1] if len(self.curve) else None
        text = []
        errs = self.inputs.get("error_text", "the stated errors")
        if self.method == "fisher":
            now = (f"{_percent(self.current['gm_relative_sigma'])} from the "
                   f"{self.current['epochs']} epochs in hand" if self.current["determined"]
                   else "no determination yet from the epochs in hand")
            text.append(f"At the assumed elements (central mass {mass:.4g} {unit}), a Fisher-"
                        f"matrix forecast that marginalises over every orbital element"
                        f"{' and the parallax' if self.inputs.get('parallax_prior') else ''} "
                        f"gives a 1-sigma precision on GM of {now}")
        else:
            text.append(f"The present posterior gives GM to "
                        f"{_percent(self.current['gm_relative_sigma'])} (1 sigma; central "
                        f"mass {mass:.4g} {unit})")
        if best is not None:
            text.append(f"; adding {best['n_epochs']} epochs chosen by the planner from the "
                        f"candidates (errors {errs}) brings it to "
                        f"{_percent(best['planned_gm_rel_sigma'])}, against "
                        f"{_percent(best['even_gm_rel_sigma'])} for the same number evenly "
                        f"spaced")
        text.append(f"; all {self.all_candidates['epochs'] - self.current['epochs']} "
                    f"candidate epochs give "
                    f"{_percent(self.all_candidates['gm_relative_sigma'])}.")
        if self.checks:
            ratios = [c["ratio"] for c in self.checks]
            text.append(f" Simulated fits of {len(self.checks)} schedule(s) gave posterior "
                        f"widths {min(ratios):.2f}-{max(ratios):.2f} times the forecast.")
        text.append(f" The mass in kg carries G's own relative uncertainty of "
                    f"{G_REL_UNCERTAINTY:.1e} in addition.")
        return "".join(text)

    def __str__(self) -> str:
        return self.report()

    def _repr_html_(self) -> str:
        from html import escape

        return f"<pre>{escape(self.report())}</pre>"

    # ------------------------------------------------------------------ plot
    def plot(self, *, figsize=None):
        """Predicted precision against the number of added epochs, and when to observe.

        Returns
        -------
        matplotlib.figure.Figure
        """
        import matplotlib.pyplot as plt

        fig, (top, bottom) = plt.subplots(2, 1, figsize=figsize or (7.0, 7.0),
                                          gridspec_kw={"height_ratios": [3, 2]})
        n = np.asarray(self.curve["n_epochs"])
        planned = 100 * np.asarray(self.curve["planned_gm_rel_sigma"], dtype=float)
        even = 100 * np.asarray(self.curve["even_gm_rel_sigma"], dtype=float)
        top.plot(n, planned, "o-", color="C0", label="epochs chosen by the planner")
        top.plot(n, even, "s--", color="C1", label="evenly spaced epochs")
        now = 100 * self.current["gm_relative_sigma"]
        if math.isfinite(now):
            top.axhline(now, color="0.4", lw=1, ls=":", label="now (no new epoch)")
        everything = 100 * self.all_candidates["gm_relative_sigma"]
        if math.isfinite(everything):
            top.axhline(everything, color="C2", lw=1, ls="-.",
                        label=f"all {self.all_candidates['epochs'] - self.current['epochs']}"
                              f" candidates")
        colours = {"planned": "C0", "evenly spaced": "C1", "all candidates": "C2"}
        for check in self.checks:
            top.plot(check["n_added"] if check["schedule"] != "all candidates"
                     else n.max() if n.size else 0,
                     100 * check["fit_gm_rel_sigma"], "x", ms=10, mew=2,
                     color=colours.get(check["schedule"], "k"),
                     label=f"simulated fit, {check['schedule']}")
        top.set_yscale("log")
        top.set_xlabel("number of added epochs")
        top.set_ylabel(r"predicted 1$\sigma$ of GM  [%]")
        top.set_title("Forecast precision of the central mass")
        top.grid(True, which="both", alpha=0.3)
        top.legend(fontsize=8)
        years = Time(np.asarray(self.ranking["time_jd"], dtype=float), format="jd",
                     scale="tdb").jyear
        after = 100 * np.asarray(self.ranking["gm_rel_sigma_after"], dtype=float)
        order = np.argsort(years)
        bottom.plot(years[order], after[order], "-", color="0.5", lw=1,
                    label="one candidate epoch added alone")
        rank = np.asarray(self.ranking["planned_order"])
        picked = rank > 0
        bottom.plot(years[picked], after[picked], "o", color="C0",
                    label="chosen (number: order of importance)")
        for y, s_, k in zip(years[picked], after[picked], rank[picked]):
            bottom.annotate(str(k), (y, s_), textcoords="offset points", xytext=(0, 6),
                            ha="center", fontsize=7, color="C0")
        if math.isfinite(now):
            bottom.axhline(now, color="0.4", lw=1, ls=":")
        bottom.set_yscale("log")
        bottom.set_xlabel("candidate epoch [Julian year, TDB]")
        bottom.set_ylabel(r"1$\sigma$ of GM [%]")
        bottom.grid(True, which="both", alpha=0.3)
        bottom.legend(fontsize=8)
        fig.tight_layout()
        return fig

    # ------------------------------------------------------------------ files
    def summary(self) -> dict:
        """The numbers as a JSON-ready dict."""
        unit = _mass_unit(self.central_mass)
        return {"method": self.method,
                "central_mass": {"unit": unit,
                                 "value": float(self.central_mass.to_value(unit))},
                "now": _json_block(self.current, unit),
                "all_candidates": _json_block(self.all_candidates, unit),
                "planned_next": _planned_list(self.ranking),
                "checks": self.checks, "notes": self.notes, "inputs": self.inputs,
                "paragraph": self.paragraph()}

    def save(self, out_dir, *, plots=True, force=False) -> Path:
        """Write ``plan.json``, ``next_epochs.ecsv``, ``precision.ecsv`` and the figure.

        The folder is written beside its final place and renamed into it at the end.
        An existing plan or fit is replaced only if ``force`` is true, and then only
        the files massfit wrote; a folder massfit did not write is never touched (see
        :mod:`massfit.write.folder`).
        """
        import matplotlib.pyplot as plt

        from massfit.write.folder import atomic_folder, write_json

        out = Path(out_dir)
        with atomic_folder(out, record="plan.json", force=force) as tmp:
            write_json(tmp / "plan.json", self.summary())
            self.ranking.write(tmp / "next_epochs.ecsv", format="ascii.ecsv")
            self.curve.write(tmp / "precision.ecsv", format="ascii.ecsv")
            if plots:
                fig = self.plot()
                for ext in ("png", "pdf"):
                    fig.savefig(tmp / f"precision.{ext}", dpi=150 if ext == "png" else None)
                plt.close(fig)
        return out


def _planned_list(ranking):
    picked = [row for row in ranking if row["planned_order"] > 0]
    picked.sort(key=lambda row: row["planned_order"])
    return [{"order": int(r["planned_order"]), "time_utc": str(r["time_utc"]),
             "time_jd_tdb": float(r["time_jd"]),
             "gm_rel_sigma_after_all_so_far": float(r["planned_gm_rel_sigma"])}
            for r in picked]


def _json_block(block, unit):
    out = {k: (None if isinstance(v, float) and not math.isfinite(v) else v)
           for k, v in block.items() if k != "mass_sigma"}
    sigma = block["mass_sigma"].to_value(unit)
    out["mass_sigma"] = {"unit": unit, "value": float(sigma) if math.isfinite(sigma) else None}
    return out


def _percent(rel):
    if rel is None or not math.isfinite(rel):
        return "undetermined"
    pct = 100 * rel
    return f"{pct:.3g} %" if pct >= 0.01 else f"{pct:.2e} %"


def _mass_unit(mass):
    from massfit.summarise.derived import best_mass_unit

    name = best_mass_unit(float(mass.to_value(u.M_sun)))
    return {"Msun": "solMass", "Mjup": "jupiterMass", "Mearth": "earthMass"}[name]


def _to_msun(quantity, key) -> float:
    q = u.Quantity(quantity)
    if q.unit.physical_type != "mass":
        raise ConfigError(f"'{quantity}' is not a mass", key=key)
    # Nominal units convert through their GM (IAU 2015), kg through CODATA G.
    value = float(q.to_value(u.M_sun))
    if not value > 0:
        raise ConfigError("a central mass must be positive", key=key)
    return value


def plan_observations(source, candidates: Schedule, *, observed: Schedule | None = None,
                      n_next: int = 5, check: int = 0, check_steps: int = 2000,
                      seed: int = 0) -> PlanResult:
    """Forecast the central mass's precision and choose the next epochs.

    Parameters
    ----------
    source : AssumedSystem, Posterior or path
        An assumed system (Fisher forecast at its elements), or a finished fit
        (its output folder or :func:`read_posterior`).
    candidates : Schedule
        The epochs that could be observed, with their expected errors.
    observed : Schedule, optional
        Epochs already in hand (an assumed system only; a fit's posterior holds its
        own data).
    n_next : int
        How many next epochs to choose, one after another (greedy).
    check : int
        How many schedules to simulate and fit to test the forecast (assumed system
        only): the planned one, the evenly spaced one, then all candidates.
    check_steps : int
        Step cap of each check's chain.
    seed : int
        Seed of the simulated noise, the chains and the subsample of the posterior.

    Returns
    -------
    PlanResult
    """
    if not isinstance(n_next, int) or isinstance(n_next, bool) or n_next < 1:
        raise ConfigError("the number of next epochs must be a whole number of at least 1",
                          key="--next")
    if not isinstance(check, int) or isinstance(check, bool) or not 0 <= check <= 3:
        raise ConfigError("check is a whole number from 0 to 3 (schedules to simulate)",
                          key="--check")
    if not isinstance(check_steps, int) or isinstance(check_steps, bool) or check_steps < 100:
        raise ConfigError("the check's step cap must be a whole number of at least 100",
                          key="--check-steps")
    check_seed(seed, key="--seed")
    if len(candidates) == 0:
        raise ConfigError("there are no candidate epochs", key="--candidates")
    if isinstance(source, (str, os.PathLike)):
        source = read_posterior(source)
    if isinstance(source, Posterior):
        if observed is not None and len(observed):
            raise ConfigError("a fit's posterior already holds its observations; give "
                              "no observed epochs with it", key="--observed")
        result = _plan_posterior(source, candidates, n_next, seed)
        if check:
            result.notes.append("no simulated check was run: checks need an assumed "
                                "system (a fit's posterior has no truth to simulate from)")
        return result
    if not isinstance(source, AssumedSystem):
        raise ConfigError("plan from an AssumedSystem, a Posterior or a fit's output folder",
                          key="source")
    return _plan_assumed(source, candidates, observed, n_next, check, check_steps, seed)


def _trials(info, chosen, left, ridge):
    """Variance after each of ``left``; where the data leave every trial undetermined,
    the weak ``ridge`` prior decides (so that the first epochs can be chosen at all)."""
    trial = info.trial_variances(chosen, left)
    if ridge is not None and not np.any(np.isfinite(trial)):
        trial = info.trial_variances(chosen, left, ridge=ridge)
    return trial


def _refine(info, baseline, chosen, candidates, ridge):
    """Swap chosen epochs for unchosen ones while that lowers the variance.

    A greedy choice is myopic: the best single epoch need not belong to the best pair.
    Exchanging one epoch at a time until no swap helps finds a better set of the same
    size (a local optimum). Only sets the data determine are compared.
    """
    chosen = list(chosen)
    variance = info.variance(list(baseline) + chosen)
    if not math.isfinite(variance):
        return chosen
    for _ in range(10):  # sweeps; each strictly lowers the variance or stops
        improved = False
        for j in range(len(chosen)):
            others = chosen[:j] + chosen[j + 1:]
            left = [c for c in candidates if c not in chosen]
            if not left:
                return chosen
            trial = info.trial_variances(list(baseline) + others, left)
            k = int(np.argmin(np.where(np.isfinite(trial), trial, np.inf)))
            if trial[k] < variance * (1 - 1e-9):
                chosen[j] = left[k]
                variance = float(trial[k])
                improved = True
        if not improved:
            break
    return chosen


def _curve(info, baseline, cand, times_jd, n_next, mass, ridge=None):
    """The planner's best sets of 1..n_next epochs, beside evenly spaced ones.

    Returns the best set of ``n_next`` epochs in order of importance (each the best
    addition to those before it), the variance after each of them, and the curve of
    precision against the number of added epochs.
    """
    rows = []
    chosen = []
    for n in range(1, min(n_next, len(cand)) + 1):
        left = [c for c in cand if c not in chosen]
        trial = _trials(info, list(baseline) + chosen, left, ridge)
        if not np.any(np.isfinite(trial)):
            break
        chosen = _refine(info, baseline, chosen + [left[int(np.argmin(trial))]], cand, ridge)
        even = [cand[k] for k in _evenly_spaced(times_jd, n)]
        # Local search from a second start, the evenly spaced set, keeps whichever is
        # better: the planner's set is then never worse than even spacing.
        alt = _refine(info, baseline, even, cand, ridge)
        if info.variance(list(baseline) + alt) < info.variance(list(baseline) + chosen):
            chosen = alt
        rows.append((n, _sqrt(info.variance(list(baseline) + chosen)),
                     _sqrt(info.variance(list(baseline) + even))))
    order = []
    for _ in range(len(chosen)):
        left = [c for c in chosen if c not in order]
        order.append(left[int(np.argmin(_trials(info, list(baseline) + order, left, ridge)))])
    planned = [info.variance(list(baseline) + order[:k + 1]) for k in range(len(order))]
    curve = Table(rows=rows or None, names=("n_epochs", "planned_gm_rel_sigma",
                                            "even_gm_rel_sigma"),
                  dtype=(int, float, float))
    curve["planned_mass_sigma"] = curve["planned_gm_rel_sigma"] * mass
    curve["even_mass_sigma"] = curve["even_gm_rel_sigma"] * mass
    return order, planned, curve


def _sqrt(variance):
    return math.sqrt(variance) if math.isfinite(variance) else math.inf


def _ranking_table(candidates, cand, order, planned, singles, now_var, spread=None,
                   spread_unit=None):
    now_sigma = _sqrt(now_var)
    sigma_after = np.array([_sqrt(v) for v in singles])
    with np.errstate(divide="ignore", invalid="ignore"):
        shrink = np.where(np.isfinite(now_sigma) & np.isfinite(sigma_after),
                          100 * (1 - sigma_after / now_sigma), np.nan)
        gain = np.where(np.isfinite(now_var) & np.isfinite(singles),
                        0.5 * np.log(now_var / np.asarray(singles)), np.nan)
    table = Table()
    table["candidate"] = np.arange(len(cand))
    table["time_utc"] = candidates.utc_isot
    table["time_jd"] = candidates.tdb_jd
    table["time_jd"].description = "JD (TDB)"
    table["error"] = candidates.error
    table["gm_rel_sigma_after"] = sigma_after
    table["shrink_percent"] = shrink
    table["information_gain"] = gain
    table["information_gain"].unit = u.dimensionless_unscaled
    table["information_gain"].description = "0.5 ln(var now / var after), nat"
    if spread is not None:
        table["predicted_spread"] = spread * spread_unit
        table["predicted_spread"].description = "posterior-predictive spread of the offset"
    planned_order = np.zeros(len(cand), dtype=int) - 1
    planned_sigma = np.full(len(cand), np.nan)
    for k, (c, v) in enumerate(zip(order, planned)):
        planned_order[cand.index(c)] = k + 1
        planned_sigma[cand.index(c)] = _sqrt(v)
    table["planned_order"] = planned_order
    table["planned_gm_rel_sigma"] = planned_sigma
    table.meta["columns"] = ("gm_rel_sigma_after: 1-sigma of GM over GM with this epoch "
                             "alone added; planned_order: position in the greedy choice "
                             "(-1: not chosen); planned_gm_rel_sigma: after the chosen "
                             "epochs up to this one")
    key = np.where(np.isfinite(sigma_after), sigma_after, np.inf)
    if not np.any(np.isfinite(key)):
        key = np.where(planned_order > 0, planned_order, 10 ** 9).astype(float)
    table = table[np.argsort(key, kind="stable")]
    table.add_column(np.arange(1, len(table) + 1), name="rank", index=0)
    return table


def _plan_assumed(system, candidates, observed, n_next, check, check_steps, seed):
    observed = observed if observed is not None else _empty_schedule(candidates.error.unit)
    schedule = observed.join(candidates)
    info = _FisherInformation(system, schedule)
    baseline = list(range(len(observed)))
    cand = list(range(len(observed), len(schedule)))
    now_var = info.variance(baseline) if baseline else math.inf
    notes = []
    ridge = None
    if not math.isfinite(now_var):
        ridge = info.ridge()
        notes.append("the epochs in hand leave the mass undetermined, so the first epochs "
                     "were chosen with a weak prior (widths of 3 dex in mass and period, "
                     "the full range of the other coordinates); the precisions reported "
                     "use the data and the stated priors alone")
    times_jd = candidates.tdb_jd
    mass = system.central_mass.to(_mass_unit(system.central_mass))
    order, planned, curve = _curve(info, baseline, cand, times_jd, n_next, mass, ridge)
    singles = info.trial_variances(baseline, cand)
    ranking = _ranking_table(candidates, cand, order, planned, singles, now_var)
    all_var = info.variance(baseline + cand)
    result = PlanResult(
        method="fisher", central_mass=mass,
        current=_precision_block(now_var, mass, len(baseline)),
        all_candidates=_precision_block(all_var, mass, len(schedule)),
        ranking=ranking, curve=curve, notes=notes,
        inputs={"now": f"{len(baseline)} epoch(s) in hand", "candidates": candidates.source,
                "observed": observed.source if len(observed) else None,
                "error_text": _error_text(candidates.error),
                "parallax_prior": system.parallax_err is not None,
                "coordinates": info.model.names})
    if check:
        plans = [("planned", baseline + order), ("evenly spaced",
                 baseline + [cand[k] for k in _evenly_spaced(times_jd, len(order))]),
                 ("all candidates", baseline + cand)]
        for label, index in plans[:check]:
            result.checks.append(_check_schedule(system, schedule.select(index), label,
                                                 len(index) - len(baseline),
                                                 _sqrt(info.variance(index)), check_steps,
                                                 seed + len(result.checks)))
    return result


def _error_text(error):
    lo, hi = np.min(error), np.max(error)
    return f"{lo:.3g}" if lo == hi else f"{lo:.3g} to {hi:.3g}"


def _plan_posterior(posterior, candidates, n_next, seed):
    info = _EnsembleInformation(posterior, candidates, seed=seed)
    cand = list(range(len(candidates)))
    now_var = info.variance([])
    mass = posterior.central_mass()
    unit = _mass_unit(mass)
    mass = mass.to(unit)
    order, planned, curve = _curve(info, [], cand, candidates.tdb_jd, n_next, mass)
    singles = info.trial_variances([], cand)
    ranking = _ranking_table(candidates, cand, order, planned, singles, now_var,
                             spread=info.spread_per_epoch(),
                             spread_unit=candidates.error.unit)
    notes = ["the posterior is updated linearly (as a Gaussian would be); where it is far "
             "from Gaussian (several period modes, a short arc) the ranking is a guide, "
             "and a refit after each new epoch tells the truth"]
    if posterior.dropped:
        notes.append(f"{posterior.dropped} posterior sample(s) with a non-finite element "
                     f"were left out")
    if posterior.converged is False:
        notes.append("the fit this plan starts from did NOT converge; its posterior, and "
                     "so this plan, may be too narrow or too wide")
    return PlanResult(
        method="posterior", central_mass=mass,
        current=_precision_block(now_var, mass, 0),
        all_candidates=_precision_block(info.variance(cand), mass, len(cand)),
        ranking=ranking, curve=curve, notes=notes,
        inputs={"now": f"posterior of {posterior.source}", "candidates": candidates.source,
                "error_text": _error_text(candidates.error),
                "posterior_samples": int(posterior.gm.size)})


# ======================================================================= checks
def _check_schedule(system, schedule, label, n_added, forecast, steps, seed):
    """Simulate ``schedule`` at the assumed elements, fit it, compare with the forecast."""
    from massfit.run import fit
    from massfit.sample.chain import SamplerSettings

    obs = simulated_observations(system, schedule, seed=seed)
    spec = system.simulated_spec(seed)
    settings = SamplerSettings(max_steps=max(int(steps), 100),
                               check_every=max(50, min(500, int(steps) // 4)),
                               seed=seed, progress=False)
    try:
        result = fit(obs, spec, sampler=settings)
    except (ModelError, RuntimeError) as exc:
        return {"schedule": label, "n_added": n_added, "forecast_gm_rel_sigma": forecast,
                "fit_gm_rel_sigma": math.nan, "ratio": math.nan, "truth_inside_95": False,
                "converged": False, "failed": str(exc)}
    gm = np.asarray(result.samples["central_gm"])
    lo, hi = np.percentile(np.log(gm), [15.865, 84.135])
    fit_sigma = 0.5 * (hi - lo)
    truth = system.mass_msun() * GM_SUN_KM3_S2
    block = result.summary["central_gm"]
    return {"schedule": label, "n_added": n_added, "epochs": len(schedule),
            "forecast_gm_rel_sigma": forecast, "fit_gm_rel_sigma": float(fit_sigma),
            "ratio": float(fit_sigma / forecast) if forecast > 0 else math.nan,
            "fit_gm_median": block["median"], "true_gm": float(truth),
            "truth_inside_95": bool(block["lower_95"] <= truth <= block["upper_95"]),
            "converged": result.converged, "steps": int(result.chain.steps),
            # A chi^2 far above the number of values means the fit found another
            # solution (a period alias, most often), not the assumed orbit.
            "fit_chi2": float(result.start.chi2),
            "values": int(2 * len(obs.astrometry)),
            "seed": seed}


def fit_scatter(system: AssumedSystem, schedule: Schedule, *, realisations: int = 50,
                seed: int = 0) -> dict:
    """The frequentist sigma of ln GM: least-squares fits of many simulated noise draws.

    Each draw simulates the schedule at the assumed elements, fits it by least squares
    (from the assumed elements, so that no period alias is picked up: this measures
    the precision, not the start search) and keeps the fitted GM.

    Returns
    -------
    dict
        ``gm_relative_sigma`` (sample standard deviation of ln GM), ``its_error``
        (its own standard error, sigma / sqrt(2 (n - 1))), ``fits`` and ``failed``.
    """
    from massfit.start.search import solve_least_squares

    masses = []
    failed = 0
    for k in range(realisations):
        spec = system.simulated_spec(seed + k)
        model = OrbitModel(simulated_observations(system, schedule, seed=seed + k), spec)
        theta = solve_least_squares(model, system.physical(model))
        if theta is None:
            failed += 1
            continue
        masses.append(float(model.physical(theta)["central_mass"][0]))
    values = np.log(masses)
    sigma = float(np.std(values, ddof=1)) if values.size > 2 else math.nan
    return {"gm_relative_sigma": sigma,
            "its_error": sigma / math.sqrt(2 * max(values.size - 1, 1)),
            "fits": int(values.size), "failed": failed}
