"""Simulated observations of invented systems: the demo data and the tests' truth.

The simulator shares the kernel with the fit (:mod:`massfit.orbits.kepler`), so what it checks
is the fitting machinery (reading, starting points, sampling, summarising), not the
formulas; those are pinned separately against published values in the tests.
"""

from __future__ import annotations

import json
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import QTable
from astropy.time import Time

from massfit.orbits import kepler
from massfit.constants import GM_SUN, KM_S_PER_AU_DAY, LIGHT_DAYS_PER_PC
from massfit.read.timescales import tdb_jd

__all__ = ["Elements", "simulate_astrometry", "simulate_velocities", "write_scenario",
           "read_back"]


class Elements(dict):
    """Orbital elements of one companion, in user units.

    Keys: ``period`` (d), ``ecc``, ``inc`` (deg), ``omega`` (deg, the companion's
    argument of periapsis), ``node`` (deg, position angle of the ascending node),
    ``periapsis_time`` (JD, TDB) and optional ``mass`` (nominal M_sun, default 0).
    """


def orbit_au(elements, t_jd, central_mass):
    mass = elements.get("mass", 0.0)
    period = elements["period"]
    a = np.cbrt(GM_SUN * (central_mass + mass) * period ** 2 / (4 * np.pi ** 2))
    east, north, z, vz = kepler.relative_orbit(
        t_jd, period, elements["ecc"], 0.0, a, np.radians(elements["inc"]),
        np.radians(elements["omega"]), np.radians(elements["node"]),
        t_ref=elements["periapsis_time"], want_velocity=True)
    return east, north, z, vz, a


def simulate_astrometry(times, elements, central_mass, *, parallax=None, distance=None,
                        error=1.0 * u.mas, corr=0.0, seed=None, light_time=True):
    """Noisy relative astrometry of companions, as a table ready to write as ECSV.

    Parameters
    ----------
    times : dict
        body name -> astropy Time (any scale) of its observations.
    elements : dict
        body name -> :class:`Elements`.
    central_mass : float
        Central mass, nominal solar masses.
    parallax : Quantity, optional
        The system's parallax; offsets are angular.
    distance : dict, optional
        body name -> Quantity array of per-row distances (e.g. a planet's moons seen
        from a moving observer); the table then has a ``distance`` column and the
        positions carry the light-time delay.
    error : Quantity
        1-sigma error on each of east and north (angle, or length when neither
        parallax nor distance is given).
    corr : float
        East-north correlation of the errors.
    seed : int, optional
        Seed of the noise.

    Returns
    -------
    astropy.table.QTable
        Columns ``time`` (TDB), ``body``, ``east``, ``north``, ``east_err``,
        ``north_err``, ``corr`` and, with per-row distances, ``distance``.
    """
    rng = np.random.default_rng(seed)
    rows = []
    for name, t in times.items():
        t_jd = tdb_jd(t)
        dist_pc = None
        if distance is not None:
            dist_pc = distance[name].to_value(u.pc)
            if light_time:
                t_jd = t_jd - dist_pc * LIGHT_DAYS_PER_PC
        east, north, _, _, _ = orbit_au(elements[name], t_jd, central_mass)
        if dist_pc is not None:
            unit, scale = u.arcsec, 1.0 / dist_pc
        elif parallax is not None:
            unit, scale = u.arcsec, parallax.to_value(u.arcsec)
        else:
            unit, scale = u.au, 1.0
        err = error.to_value(unit)
        cov = err ** 2 * np.array([[1.0, corr], [corr, 1.0]])
        noise = rng.multivariate_normal([0.0, 0.0], cov, size=len(t_jd))
        block = {
            "time": t.tdb, "body": np.full(len(t_jd), name),
            "east": (east * scale + noise[:, 0]) * unit,
            "north": (north * scale + noise[:, 1]) * unit,
            "east_err": np.full(len(t_jd), err) * unit,
            "north_err": np.full(len(t_jd), err) * unit,
            "corr": np.full(len(t_jd), corr),
        }
        if dist_pc is not None:
            block["distance"] = (dist_pc * u.pc).to(u.au)
        rows.append(block)
    return _stack(rows)


def simulate_velocities(times, elements, central_mass, *, primary="primary",
                        gamma=0.0 * u.km / u.s, error=10.0 * u.m / u.s,
                        jitter=0.0 * u.m / u.s, slope=0.0 * u.km / u.s / u.day,
                        instrument=None, seed=None):
    """Noisy barycentric radial velocities of the primary and of companions.

    Parameters
    ----------
    times : dict
        body name -> astropy Time of its velocities; the name ``primary`` stands for
        the primary's own velocities (the reflex of every companion).
    elements : dict
        companion name -> :class:`Elements` (``mass`` is the companion's mass).
    central_mass : float
        Mass of the primary, nominal solar masses.
    primary : str
        The primary's name in ``times`` and in the table.
    gamma : Quantity
        Systemic velocity.
    error, jitter : Quantity
        The stated 1-sigma error of each velocity, and extra scatter added in
        quadrature to the noise but not to the stated error.
    slope : Quantity
        A linear trend (velocity per time) about the mean of all the times.
    instrument : str, optional
        An ``instrument`` column with this label.
    seed : int, optional
        Seed of the noise.

    Returns
    -------
    astropy.table.QTable
        Columns ``time`` (TDB), ``body``, ``rv``, ``rv_err`` (km/s) and, where asked,
        ``instrument``.

    Notes
    -----
    The velocities follow the conventions: v_primary = gamma - sum_k m_k/(M1 + m_k)
    v_rel,k and a companion's own velocity is v_primary + v_rel (v_rel = dz/dt).
    """
    rng = np.random.default_rng(seed)
    err = error.to_value(u.km / u.s)
    scatter = np.hypot(err, jitter.to_value(u.km / u.s))
    all_jd = np.concatenate([tdb_jd(t) for t in times.values()])
    t_mid = float(np.mean(all_jd))
    rows = []
    for name, t in times.items():
        t_jd = tdb_jd(t)
        v = gamma.to_value(u.km / u.s) + slope.to_value(u.km / u.s / u.day) * (t_jd - t_mid)
        for other, el in elements.items():
            vz = orbit_au(el, t_jd, central_mass)[3] * KM_S_PER_AU_DAY
            mass = el.get("mass", 0.0)
            v = v - mass / (central_mass + mass) * vz
            if other == name:
                v = v + vz
        block = {"time": t.tdb, "body": np.full(len(t_jd), name),
                 "rv": (v + scatter * rng.standard_normal(len(t_jd))) * u.km / u.s,
                 "rv_err": np.full(len(t_jd), err) * u.km / u.s}
        if instrument is not None:
            block["instrument"] = np.full(len(t_jd), instrument)
        rows.append(block)
    return _stack(rows)


def _stack(blocks):
    table = QTable()
    for key in blocks[0]:
        parts = [b[key] for b in blocks]
        if key == "time":
            table[key] = Time(np.concatenate([p.jd for p in parts]), format="jd",
                              scale="tdb")
        elif isinstance(parts[0], u.Quantity):
            table[key] = u.Quantity(np.concatenate([p.value for p in parts]), parts[0].unit)
        else:
            table[key] = np.concatenate(parts)
    table.sort("time")
    return table


def write_scenario(folder, table, truth, *, name="astrometry.ecsv", description=""):
    """Write a simulated table as ECSV and its truth as ``truth.json`` beside it."""
    from astropy.table import Table

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = Table()
    t = table["time"]
    out["time"] = Time(getattr(t, t.scale).isot, format="isot", scale=t.scale)
    out["body"] = table["body"]
    for col in ("east", "north", "east_err", "north_err", "rv", "rv_err"):
        if col not in table.colnames:
            continue
        values = table[col]
        if values.unit.physical_type == "angle":
            values = values.to(u.mas)
        out[col] = values
        out[col].info.format = ".6f" if col.startswith("rv") else ".4f"
    for col in table.colnames:
        if col not in out.colnames:
            out[col] = table[col]
    if "corr" in out.colnames:
        out["corr"].info.format = ".3f"
    if "distance" in out.colnames:
        out["distance"].info.format = ".7f"
    out.meta["description"] = description
    out.write(folder / name, format="ascii.ecsv", overwrite=True)
    if truth is not None:
        with open(folder / "truth.json", "w") as handle:
            json.dump(truth, handle, indent=2)


def read_back(table, *, name="simulated.ecsv"):
    """Observations of a simulated table, by way of an ECSV file and massfit's reader.

    Simulated data then take the path a user's file takes (units, times, checks).
    """
    import tempfile

    from massfit.read.tables import read_observations

    with tempfile.TemporaryDirectory() as folder:
        write_scenario(folder, table, None, name=name)
        return read_observations(Path(folder) / name)
