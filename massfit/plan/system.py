"""The assumed system (central mass, parallax, companions' elements) and data simulated from it."""
from __future__ import annotations

import math
from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.time import Time

from massfit.constants import LIGHT_DAYS_PER_PC
from massfit.errors import ConfigError
from massfit.model.orbit_model import OrbitModel
from massfit.model.specs import SystemSpec
from massfit.plan.schedule import Schedule, distance_pc, epoch_rows
from massfit.priors import Fixed, Normal
from massfit.read.observations import AstrometryData, Observations
from massfit.read.timescales import tdb_jd


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
        from massfit.model.specs import CompanionSpec

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
    epoch, body = epoch_rows(system.companions, schedule)
    n = len(epoch)
    t_jd = schedule.tdb_jd[epoch]
    distance = distance_pc(schedule)[epoch]
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


def _to_msun(quantity, key) -> float:
    q = u.Quantity(quantity)
    if q.unit.physical_type != "mass":
        raise ConfigError(f"'{quantity}' is not a mass", key=key)
    # Nominal units convert through their GM (IAU 2015), kg through CODATA G.
    value = float(q.to_value(u.M_sun))
    if not value > 0:
        raise ConfigError("a central mass must be positive", key=key)
    return value
