"""Simulated moons of a planet seen by an observer that moves round a star.

Made independently of the model's projection (:mod:`massfit.orbits.viewing`): every body is
a full 3-D vector in ICRS axes, each light time is iterated to convergence (the
planet at t - tau_p, each moon at its own t - tau_m, the observer at t), and the
offsets come from astropy's sky-offset frame (``SkyCoord.spherical_offsets_to``),
turned into tangent-plane (gnomonic) coordinates: xi = tan(dlon),
eta = tan(dlat) / cos(dlon). The moons' orbits are built with rotation matrices
R_z(node) R_x(inc) R_z(omega), not with the model's Thiele-Innes form. The planet
moves too, so the model's first-order light-time step is checked against the exact
retarded positions.

The demo (Orvane) and the tests use it; the scenarios are invented.
"""

from __future__ import annotations

from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.constants import c
from astropy.coordinates import SkyCoord
from astropy.table import QTable
from astropy.time import Time

from massfit.constants import GM_SUN

__all__ = ["CircularPath", "MoonOrbit", "observe_moons"]

_C_AU_DAY = (c * u.day / u.au).to_value(u.one)


def _rotation(inc_deg, node_deg, omega_deg=0.0):
    """R_z(node) R_x(inc) R_z(omega): orbital plane to ICRS axes."""
    def rz(angle):
        ca, sa = np.cos(angle), np.sin(angle)
        return np.array([[ca, -sa, 0.0], [sa, ca, 0.0], [0.0, 0.0, 1.0]])

    ci, si = np.cos(np.radians(inc_deg)), np.sin(np.radians(inc_deg))
    rx = np.array([[1.0, 0.0, 0.0], [0.0, ci, -si], [0.0, si, ci]])
    return rz(np.radians(node_deg)) @ rx @ rz(np.radians(omega_deg))


@dataclass
class CircularPath:
    """A body on a circular orbit about the star (at the origin), ICRS axes.

    Parameters are the radius (au), the period (d), the inclination and node of its
    plane against the ICRS equator (deg), and its longitude in that plane (deg) at
    ``epoch_jd``.
    """

    radius: float
    period: float
    inclination: float
    node: float
    longitude: float
    epoch_jd: float

    def position(self, t_jd):
        """Position (n, 3), au, at TDB Julian dates ``t_jd``."""
        angle = (np.radians(self.longitude)
                 + 2.0 * np.pi * (np.asarray(t_jd, dtype=float) - self.epoch_jd) / self.period)
        flat = self.radius * np.column_stack([np.cos(angle), np.sin(angle),
                                              np.zeros_like(angle)])
        return flat @ _rotation(self.inclination, self.node).T


@dataclass
class MoonOrbit:
    """A Keplerian orbit about the planet in ICRS axes (angles in deg, times JD TDB)."""

    period: float
    ecc: float
    inc: float
    omega: float
    node: float
    periapsis_time: float

    def position(self, t_jd, gm_au3_d2):
        """Relative position (n, 3), au, for the planet's GM in au^3/day^2."""
        a = np.cbrt(gm_au3_d2 * self.period ** 2 / (4.0 * np.pi ** 2))
        mean = 2.0 * np.pi * (np.asarray(t_jd, dtype=float) - self.periapsis_time) / self.period
        big_e = mean.copy()
        for _ in range(60):  # Newton on E - e sin E = M, from E = M
            big_e -= (big_e - self.ecc * np.sin(big_e) - mean) / (1.0 - self.ecc * np.cos(big_e))
        flat = np.column_stack([a * (np.cos(big_e) - self.ecc),
                                a * np.sqrt(1.0 - self.ecc ** 2) * np.sin(big_e),
                                np.zeros_like(big_e)])
        return flat @ _rotation(self.inc, self.node, self.omega).T


def _retarded(where, observer, t_jd):
    """Iterate the light time: the body's position at t - tau, with tau its distance."""
    tau = np.zeros(len(t_jd))
    for _ in range(6):
        vector = where(t_jd - tau) - observer
        tau = np.linalg.norm(vector, axis=1) / _C_AU_DAY
    return where(t_jd - tau) - observer


def observe_moons(times, moons, planet_mass, planet: CircularPath, observer: CircularPath,
                  *, error=0.01 * u.arcsec, seed=None, aberration=False):
    """Noisy tangent-plane offsets of moons from their planet, per observation.

    Parameters
    ----------
    times : dict
        moon name -> astropy Time of its observations.
    moons : dict
        moon name -> :class:`MoonOrbit`.
    planet_mass : float
        The planet's GM over the Sun's nominal GM.
    planet, observer : CircularPath
        Their paths about the star.
    error : Quantity
        1-sigma error of each offset (an angle, or a length for offsets in km).
    seed : int, optional
        Noise seed; None gives exact offsets.
    aberration : bool
        Give apparent offsets (each direction aberrated by the observer's velocity,
        first order in v/c) instead of astrometric ones.

    Returns
    -------
    QTable
        ``time`` (TDB JD), ``body``, ``east``, ``north``, their errors, the planet's
        ``primary_ra``, ``primary_dec`` (deg) and ``distance`` (au).
    """
    rng = np.random.default_rng(seed)
    gm = GM_SUN * planet_mass
    length = error.unit.is_equivalent(u.km)
    blocks = []
    for name, moon in moons.items():
        t_jd = np.asarray(times[name].tdb.jd, dtype=float)
        seen_from = observer.position(t_jd)
        primary = _retarded(planet.position, seen_from, t_jd)
        companion = _retarded(lambda t: planet.position(t) + moon.position(t, gm),
                              seen_from, t_jd)
        distance = np.linalg.norm(primary, axis=1)
        if aberration:
            step = 1e-3  # days: the observer's velocity by a central difference
            beta = (observer.position(t_jd + step) - observer.position(t_jd - step)) / (
                2.0 * step * _C_AU_DAY)
            primary, companion = (_aberrate(v, beta) for v in (primary, companion))
        xi, eta, ra, dec = _tangent_offsets(primary, companion)
        scale = distance * u.au if length else u.rad
        east = (xi * scale).to(error.unit)
        north = (eta * scale).to(error.unit)
        if seed is not None:
            east = east + error * rng.standard_normal(len(t_jd))
            north = north + error * rng.standard_normal(len(t_jd))
        blocks.append(QTable({
            "time": t_jd, "body": np.full(len(t_jd), name),
            "east": east, "north": north,
            "east_err": np.full(len(t_jd), error.value) * error.unit,
            "north_err": np.full(len(t_jd), error.value) * error.unit,
            "primary_ra": ra, "primary_dec": dec, "distance": distance * u.au}))
    from astropy.table import vstack

    table = vstack(blocks)
    table.sort(["time", "body"])
    table.meta.update({"time_format": "jd", "time_scale": "tdb"})
    return table


def _aberrate(vector, beta):
    """First-order aberration: the unit direction u -> u + beta - (u . beta) u."""
    unit = vector / np.linalg.norm(vector, axis=1)[:, None]
    dot = np.sum(unit * beta, axis=1)[:, None]
    seen = unit + beta - dot * unit
    return seen / np.linalg.norm(seen, axis=1)[:, None] * np.linalg.norm(vector, axis=1)[:, None]


def _tangent_offsets(primary, companion):
    """Gnomonic offsets of ``companion`` about ``primary`` via astropy's offset frame."""
    def coord(v):
        return SkyCoord(x=v[:, 0], y=v[:, 1], z=v[:, 2], unit=u.au,
                        representation_type="cartesian", frame="icrs")

    centre = coord(primary)
    dlon, dlat = centre.spherical_offsets_to(coord(companion))
    dlon, dlat = dlon.to_value(u.rad), dlat.to_value(u.rad)
    xi = np.tan(dlon)
    eta = np.tan(dlat) / np.cos(dlon)
    spherical = centre.represent_as("unitspherical")
    return xi, eta, spherical.lon.to(u.deg), spherical.lat.to(u.deg)


def moon_times(start_jd, span_days, count, *, seed=0):
    """``count`` observing times over ``span_days`` from ``start_jd`` (TDB), irregular."""
    rng = np.random.default_rng(seed)
    return Time(np.sort(start_jd + span_days * rng.random(count)), format="jd", scale="tdb")
