"""Offsets of a real giant planet's four large moons from an independent theory.

The positions come from ``pymeeus.JupiterMoons`` (J. Meeus, *Astronomical Algorithms*,
2nd ed., ch. 44, high-accuracy method, after Lieske's E5 theory): X, Y in the planet's
equatorial radii, X positive towards the west along the planet's equator as seen, Y
positive towards its north pole, with the differential light time and perspective
already applied. They are turned into east/north offsets in km with the position angle
P of the planet's north pole, computed from the pole's right ascension and declination
(IAU WGCCRE 2015 report: alpha0 = 268.056595 - 0.006499 T, delta0 = 64.495303 +
0.002413 T deg, T in Julian centuries from J2000; values from memory, periodic terms
left out: a near-constant rotation of the offsets is absorbed by the orbits' nodes).
The planet's direction and distance per epoch come from astropy's built-in ephemeris.

Used by ``tests/test_viewing.py`` and ``validation/real_moons.py``.
"""

from __future__ import annotations

import numpy as np
import astropy.units as u
from astropy.table import QTable
from astropy.time import Time

#: The planet's equatorial radius the theory's X, Y are counted in, km: E5's value
#: (from memory; its perspective constant 2095 radii per au agrees to 1e-4).
RADIUS_KM = 71398.0
#: Published GM of the planet alone (JPL satellite ephemeris JUP230, R. Jacobson;
#: value from memory), km^3/s^2.
PUBLISHED_GM = 126_686_534.0
MOONS = ("Io", "Europa", "Ganymede", "Callisto")


def pole_position_angle(ra, dec, t_jd):
    """Position angle (rad, north through east) of the pole seen at (ra, dec) rad."""
    centuries = (np.asarray(t_jd) - 2451545.0) / 36525.0
    ra0 = np.radians(268.056595 - 0.006499 * centuries)
    dec0 = np.radians(64.495303 + 0.002413 * centuries)
    return np.arctan2(np.cos(dec0) * np.sin(ra0 - ra),
                      np.sin(dec0) * np.cos(dec) - np.cos(dec0) * np.sin(dec) * np.cos(ra0 - ra))


def meeus_table(n_epochs=150, span_days=730.0, start_jd=2461041.5, error_km=200.0,
                seed=15, moons=MOONS):
    """Noisy east/north offsets (km) of the moons, with the planet's direction per row.

    Returns
    -------
    QTable
        time (JD, TDB), body, east, north, east_err, north_err (km), primary_ra,
        primary_dec (deg), distance (au).
    """
    from pymeeus.Epoch import Epoch
    from pymeeus.JupiterMoons import JupiterMoons

    from massfit.orbits.viewing import ephemeris_sight

    rng = np.random.default_rng(seed)
    t_jd = np.sort(start_jd + span_days * rng.random(n_epochs))
    time = Time(t_jd, format="jd", scale="tdb")
    ra, dec, distance = ephemeris_sight("jupiter", time)
    angle = pole_position_angle(ra, dec, t_jd)
    rows = {key: [] for key in ("time", "body", "east", "north", "ra", "dec", "distance")}
    for k, jd in enumerate(t_jd):
        positions = JupiterMoons.rectangular_positions_jovian_equatorial(Epoch(jd))
        for index, name in enumerate(MOONS):
            if name not in moons:
                continue
            x, y, _ = positions[index]
            rows["time"].append(jd)
            rows["body"].append(name)
            rows["east"].append(RADIUS_KM * (-x * np.cos(angle[k]) + y * np.sin(angle[k])))
            rows["north"].append(RADIUS_KM * (x * np.sin(angle[k]) + y * np.cos(angle[k])))
            rows["ra"].append(ra[k])
            rows["dec"].append(dec[k])
            rows["distance"].append(distance[k])
    n = len(rows["time"])
    noise = error_km * rng.standard_normal((2, n))
    table = QTable({
        "time": np.array(rows["time"]), "body": np.array(rows["body"]),
        "east": (np.array(rows["east"]) + noise[0]) * u.km,
        "north": (np.array(rows["north"]) + noise[1]) * u.km,
        "east_err": np.full(n, error_km) * u.km, "north_err": np.full(n, error_km) * u.km,
        "primary_ra": np.degrees(rows["ra"]) * u.deg,
        "primary_dec": np.degrees(rows["dec"]) * u.deg,
        "distance": np.array(rows["distance"]) * u.au})
    table.meta.update({"time_format": "jd", "time_scale": "tdb"})
    return table
