"""The line of sight to a primary whose direction changes from row to row.

For a primary inside the solar system (a planet and its moons) the orbits live in an
inertial frame with ICRS axes (x towards RA = 0, Dec = 0; z towards Dec = +90 deg) and
each astrometric row is projected onto the tangent plane at the primary's direction at
that row's time. This module holds that projection and the ways to get the direction:

* :func:`sight_from_angles`: per-row right ascension, declination and distance (the
  ``primary_ra``, ``primary_dec`` and ``distance`` columns);
* :func:`ephemeris_sight`: a solar-system body by name, from astropy's ephemerides,
  for a geocentric observer or an observatory site;
* :func:`differential_aberration`: what the observer's velocity does to small offsets
  (for simulations and for judging whether it matters).

The projection is the exact gnomonic one: with d the unit vector towards the primary,
D its distance and r the companion's position relative to the primary,

    east = e.r / (D + d.r),   north = n.r / (D + d.r)   (radians)

so the companion's own distance (D + d.r, perspective) is part of it. The offsets are
*astrometric*: light time is included (the primary at t - D/c, the companion later or
earlier by d.r/c), the aberration due to the observer's velocity is not.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

__all__ = ["Sight", "sight_from_angles", "sky_basis", "project", "along_sight",
           "orientation_in_icrs", "mean_direction", "angles_of", "plane_of", "tangent_turn",
           "ephemeris_sight", "aberration_maps",
           "observer_velocity", "ViewingSpec", "with_ephemeris", "OFFSET_KINDS",
           "against_equator", "viewing_from_settings",
           "differential_aberration", "EPHEMERIS_DEFAULT"]

#: The ephemeris used when a body is named without one (astropy's built-in ERFA one).
EPHEMERIS_DEFAULT = "builtin"


@dataclass
class Sight:
    """The primary's direction and distance at each astrometric row.

    Attributes
    ----------
    toward : ndarray, shape (n, 3)
        Unit vector from the observer towards the primary (ICRS axes).
    east, north : ndarray, shape (n, 3)
        Unit vectors of the tangent plane there (the conventions' east and north).
    distance : ndarray, shape (n,)
        Distance from the observer to the primary, au.
    apparent : ndarray, shape (n, 2, 2), optional
        Where the offsets are apparent: the linear map from astrometric (east, north)
        to apparent ones (differential aberration); None for astrometric offsets.
    """

    toward: np.ndarray
    east: np.ndarray
    north: np.ndarray
    distance: np.ndarray
    apparent: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.distance)

    def select(self, index) -> "Sight":
        """The rows ``index`` (an integer array or a mask)."""
        return Sight(self.toward[index], self.east[index], self.north[index],
                     self.distance[index],
                     None if self.apparent is None else self.apparent[index])


def sky_basis(ra, dec):
    """Unit vectors towards (ra, dec) and of the tangent plane's east and north there.

    Parameters
    ----------
    ra, dec : array_like
        Right ascension and declination, radians.

    Returns
    -------
    toward, east, north : ndarray, shape (n, 3)
        ``east`` = (-sin a, cos a, 0), ``north`` = (-sin d cos a, -sin d sin a, cos d).
    """
    ra = np.atleast_1d(np.asarray(ra, dtype=float))
    dec = np.atleast_1d(np.asarray(dec, dtype=float))
    ca, sa, cd, sd = np.cos(ra), np.sin(ra), np.cos(dec), np.sin(dec)
    toward = np.column_stack([cd * ca, cd * sa, sd])
    east = np.column_stack([-sa, ca, np.zeros_like(ra)])
    north = np.column_stack([-sd * ca, -sd * sa, cd])
    return toward, east, north


def sight_from_angles(ra, dec, distance) -> Sight:
    """A :class:`Sight` from per-row right ascension, declination (rad) and distance (au)."""
    toward, east, north = sky_basis(ra, dec)
    return Sight(toward, east, north, np.atleast_1d(np.asarray(distance, dtype=float)))


def _dot(basis, position):
    """basis (n_rows, 3) . position (x, y, z each (n_walkers, n_rows))."""
    x, y, z = position
    return basis[:, 0] * x + basis[:, 1] * y + basis[:, 2] * z


def along_sight(sight: Sight, position):
    """d . r: how much farther than the primary each companion is (au, (n, n_rows))."""
    return _dot(sight.toward, position)


def project(sight: Sight, position):
    """Observed offsets of relative positions, as angles times the primary's distance.

    Parameters
    ----------
    sight : Sight
        The rows' lines of sight.
    position : tuple of ndarray
        (x, y, z) of the companion relative to the primary, ICRS axes, au, each of
        shape (n_walkers, n_rows) (or broadcastable to it).

    Returns
    -------
    east, north : ndarray
        The angular offsets times D (au): divided by D they are the gnomonic
        standard coordinates in radians; the per-row distance then turns them into
        arcsec exactly as for a fixed sky plane (1 au at 1 pc is 1 arcsec). Apparent
        where ``sight.apparent`` is set (the aberration map, linear in the offsets).
    """
    depth = sight.distance + along_sight(sight, position)
    factor = sight.distance / depth
    east, north = factor * _dot(sight.east, position), factor * _dot(sight.north, position)
    if sight.apparent is None:
        return east, north
    m = sight.apparent
    return m[:, 0, 0] * east + m[:, 0, 1] * north, m[:, 1, 0] * east + m[:, 1, 1] * north


def differential_aberration(sight: Sight, velocity_km_s, east, north):
    """Apparent minus astrometric offsets caused by the observer's velocity.

    Parameters
    ----------
    sight : Sight
        The rows' lines of sight (the primary's astrometric direction).
    velocity_km_s : ndarray, shape (n, 3)
        The observer's barycentric velocity, km/s, ICRS axes.
    east, north : ndarray, shape (n,)
        Astrometric offsets, radians.

    Returns
    -------
    d_east, d_north : ndarray
        What aberration adds to the offsets (radians), from the exact relativistic
        aberration of both directions (the primary's and the companion's).
    """
    from astropy.constants import c

    beta = np.asarray(velocity_km_s, dtype=float) / c.to_value("km/s")
    # Directions of the companion from its tangent-plane coordinates (gnomonic).
    companion = (sight.toward + east[:, None] * sight.east + north[:, None] * sight.north)
    companion /= np.linalg.norm(companion, axis=1)[:, None]
    seen_primary = _aberrated(sight.toward, beta)
    seen_companion = _aberrated(companion, beta)
    # Offsets of the apparent companion on the apparent primary's tangent plane.
    ra = np.arctan2(seen_primary[:, 1], seen_primary[:, 0])
    dec = np.arcsin(np.clip(seen_primary[:, 2], -1.0, 1.0))
    toward, e_vec, n_vec = sky_basis(ra, dec)
    depth = np.sum(seen_companion * toward, axis=1)
    app_east = np.sum(seen_companion * e_vec, axis=1) / depth
    app_north = np.sum(seen_companion * n_vec, axis=1) / depth
    return app_east - east, app_north - north


def _aberrated(direction, beta):
    """Apparent direction of light arriving from ``direction`` for an observer moving
    at ``beta`` = v/c (special relativity, e.g. the Explanatory Supplement's formula)."""
    b2 = np.sum(beta * beta, axis=1)[:, None]
    gamma_inv = np.sqrt(1.0 - b2)
    dot = np.sum(direction * beta, axis=1)[:, None]
    seen = (gamma_inv * direction + beta + dot * beta / (1.0 + gamma_inv)) / (1.0 + dot)
    return seen / np.linalg.norm(seen, axis=1)[:, None]


def ephemeris_sight(body: str, time, *, site=None, ephemeris: str | None = None,
                    with_velocity: bool = False):
    """The astrometric direction and distance of a solar-system body, per time.

    Parameters
    ----------
    body : str
        A body astropy's ephemerides know (``"jupiter"``, ``"saturn"``, ...).
    time : astropy.time.Time
        Times of observation (as received at the observer).
    site : astropy.coordinates.EarthLocation, optional
        The observatory; None for the Earth's centre.
    ephemeris : str, optional
        ``"builtin"`` (the default), a JPL kernel name astropy knows (``"de421"``,
        ...) or the path or URL of a kernel file.
    with_velocity : bool
        Also return the observer's barycentric velocity (km/s, ICRS axes).

    Returns
    -------
    ra, dec : ndarray
        The body's astrometric direction (light-time corrected, no aberration), rad.
    distance : ndarray
        Its distance from the observer at the light-time-corrected epoch, au.
    velocity : ndarray, shape (n, 3)
        Only with ``with_velocity``.

    Notes
    -----
    The light time is iterated three times from zero; each pass shrinks the error
    by the body's speed over c (about 1e-4), far below any use here.
    """
    import astropy.units as u
    from astropy.constants import c
    from astropy.coordinates import get_body_barycentric, get_body_barycentric_posvel, \
        solar_system_ephemeris

    ephemeris = ephemeris or EPHEMERIS_DEFAULT
    time = time.reshape((1,)) if time.isscalar else time
    with solar_system_ephemeris.set(ephemeris):
        earth, earth_velocity = get_body_barycentric_posvel("earth", time)
        observer = earth.xyz.to_value(u.au).T
        velocity = earth_velocity.xyz.to_value(u.km / u.s).T
        if site is not None:
            position, site_velocity = site.get_gcrs_posvel(time)
            observer = observer + position.xyz.to_value(u.au).T
            velocity = velocity + site_velocity.xyz.to_value(u.km / u.s).T
        delay = np.zeros(len(np.atleast_1d(time.jd)))
        for _ in range(3):
            where = get_body_barycentric(body, time - delay * u.day).xyz.to_value(u.au).T
            vector = where - observer
            distance = np.linalg.norm(vector, axis=1)
            delay = distance * (u.au / c).to_value(u.day)
    ra = np.mod(np.arctan2(vector[:, 1], vector[:, 0]), 2.0 * np.pi)
    dec = np.arcsin(vector[:, 2] / distance)
    if with_velocity:
        return ra, dec, distance, velocity
    return ra, dec, distance


def orientation_in_icrs(inc, omega, node, toward):
    """An orbit's orientation on a fixed sky plane, turned into ICRS elements.

    Parameters
    ----------
    inc, omega, node : float
        Inclination, argument of periapsis and position angle of the ascending node
        (rad) against the sky plane at ``toward`` (z away from the observer).
    toward : array_like, shape (3,)
        The line of sight of that sky plane (ICRS unit vector).

    Returns
    -------
    inc, omega, node : float
        The same orbit's elements against the ICRS equator and x axis (rad).

    Notes
    -----
    The periapsis and quarter-turn unit vectors P, Q have sky components
    (north, east, z); in ICRS they are north * n + east * e + z * d. The elements
    follow from W = P x Q = (sin i sin node, -sin i cos node, cos i) and
    P_z = sin w sin i, Q_z = cos w sin i.
    """
    from massfit.orbits.kepler import orbit_axes

    d_vec, e_vec, n_vec = (v[0] for v in sky_basis(*angles_of(toward)))
    p_sky, q_sky = orbit_axes(inc, omega, node)
    p_vec = p_sky[0] * n_vec + p_sky[1] * e_vec + p_sky[2] * d_vec
    q_vec = q_sky[0] * n_vec + q_sky[1] * e_vec + q_sky[2] * d_vec
    w_vec = np.cross(p_vec, q_vec)
    inc_icrs = float(np.arccos(np.clip(w_vec[2], -1.0, 1.0)))
    node_icrs = float(np.arctan2(w_vec[0], -w_vec[1]))
    omega_icrs = float(np.arctan2(p_vec[2], q_vec[2]))
    return inc_icrs, omega_icrs, node_icrs


def mean_direction(sight: Sight):
    """The unit vector of the rows' mean line of sight."""
    mean = np.mean(sight.toward, axis=0)
    return mean / np.linalg.norm(mean)


def angles_of(vector):
    """Right ascension in [0, 2 pi) and declination (rad) of a vector (3,), ICRS."""
    vector = np.asarray(vector, dtype=float)
    vector = vector / np.linalg.norm(vector)
    return (float(np.mod(np.arctan2(vector[1], vector[0]), 2.0 * np.pi)),
            float(np.arcsin(np.clip(vector[2], -1.0, 1.0))))


def plane_of(toward):
    """East and north unit vectors (3,) of the tangent plane at the unit vector
    ``toward`` (ICRS), as :func:`sky_basis` gives them."""
    _, east, north = sky_basis(*angles_of(toward))
    return east[0], north[0]


def tangent_turn(sight: Sight, toward):
    """Per row, the angle (rad) by which the row's tangent-plane axes are turned
    against those of the plane at ``toward``.

    The row's (east, north) axes projected onto the other plane form a 2x2 map J
    from the row's (east, north) components to the plane's; the angle psi is that of
    the rotation [[cos psi, -sin psi], [sin psi, cos psi]] nearest to J,
    psi = atan2(J_ne - J_en, J_ee + J_nn) (positive: the row's east turned towards the
    plane's north). Turning a row's offsets and errors by it carries their
    directions over to the other plane without changing their lengths (J itself
    would also shorten them by the cosine of the tilt).
    """
    east, north = plane_of(toward)
    j_ee, j_en = sight.east @ east, sight.north @ east
    j_ne, j_nn = sight.east @ north, sight.north @ north
    return np.arctan2(j_ne - j_en, j_ee + j_nn)


def aberration_maps(sight: Sight, velocity_km_s):
    """Per row, the 2x2 map from astrometric to apparent (east, north) offsets.

    Differential aberration is linear in the offsets to first order in them (its
    parts: the scale 1 - beta . d and the turn of north at the displaced tangent
    point); the map is measured from :func:`differential_aberration` on two small
    offsets. Its error is of order beta times the offset (radians), 1e-4 of the
    aberration itself for moons a few arcminutes out.
    """
    step = 1e-4  # radians: small enough for linearity, far above rounding
    n = len(sight)
    zero, probe = np.zeros(n), np.full(n, step)
    columns = []
    for east, north in ((probe, zero), (zero, probe)):
        d_east, d_north = differential_aberration(sight, velocity_km_s, east, north)
        columns.append(np.column_stack([east + d_east, north + d_north]) / step)
    return np.stack(columns, axis=2)


def observer_velocity(time, *, site=None, ephemeris=None):
    """The observer's barycentric velocity (km/s, ICRS axes): the Earth's, plus the
    site's rotation where a site is given."""
    import astropy.units as u
    from astropy.coordinates import get_body_barycentric_posvel, solar_system_ephemeris

    time = time.reshape((1,)) if time.isscalar else time
    with solar_system_ephemeris.set(ephemeris or EPHEMERIS_DEFAULT):
        _, velocity = get_body_barycentric_posvel("earth", time)
    velocity = velocity.xyz.to_value(u.km / u.s).T
    if site is not None:
        velocity = velocity + site.get_gcrs_posvel(time)[1].xyz.to_value(u.km / u.s).T
    return velocity


#: Accepted values of :attr:`ViewingSpec.offsets`.
OFFSET_KINDS = ("astrometric", "apparent")


@dataclass
class ViewingSpec:
    """How the line of sight to the primary is known, and what the offsets are.

    Parameters
    ----------
    ephemeris_body : str, optional
        A solar-system primary by name: its direction and distance at every row come
        from astropy's ephemerides (instead of ``primary_ra``/``primary_dec`` columns).
    ephemeris : str
        ``"builtin"`` or the path of a JPL kernel (``.bsp``).
    site : astropy.coordinates.EarthLocation, optional
        The observatory; None for the Earth's centre.
    offsets : {"astrometric", "apparent"}
        Apparent offsets carry the differential aberration of the observer's velocity
        (the Earth's, plus the site's rotation); the model then applies it.
    pole_ra, pole_dec : float, optional
        The primary's north pole (rad, ICRS): the summary then also gives each orbit's
        inclination and node against the primary's equator.
    """

    ephemeris_body: str | None = None
    ephemeris: str = EPHEMERIS_DEFAULT
    site: object | None = None
    offsets: str = "astrometric"
    pole_ra: float | None = None
    pole_dec: float | None = None

    def settings(self) -> dict:
        """The settings as :func:`viewing_from_settings` takes them (for run.json)."""
        out = {"ephemeris_body": self.ephemeris_body, "ephemeris": self.ephemeris,
               "offsets": self.offsets}
        if self.site is not None:
            site = self.site
            out["site"] = [f"{float(site.lon.deg)!r} deg", f"{float(site.lat.deg)!r} deg",
                           f"{float(site.height.to_value('m'))!r} m"]
        if self.pole_ra is not None:
            out["pole_ra"] = f"{float(self.pole_ra)!r} rad"
            out["pole_dec"] = f"{float(self.pole_dec)!r} rad"
        return out

    def describe(self) -> dict:
        """The settings, for the summary and the run record."""
        out = {"frame": "ICRS", "offsets": self.offsets,
               "direction_from": ("ephemeris" if self.ephemeris_body else
                                  "primary_ra/primary_dec columns")}
        if self.ephemeris_body or self.offsets == "apparent":
            out["ephemeris"] = self.ephemeris
            out["site"] = "geocentre" if self.site is None else {
                "longitude_deg": float(self.site.lon.deg),
                "latitude_deg": float(self.site.lat.deg),
                "height_m": float(self.site.height.to_value("m"))}
        if self.ephemeris_body:
            out["ephemeris_body"] = self.ephemeris_body
        if self.pole_ra is not None:
            out["pole_ra_deg"] = float(np.degrees(self.pole_ra))
            out["pole_dec_deg"] = float(np.degrees(self.pole_dec))
        return out


def with_ephemeris(observations, viewing: ViewingSpec | None):
    """The observations with each astrometric row's primary direction and distance
    filled in from the ephemeris, where ``viewing`` names a body; else unchanged."""
    from dataclasses import replace

    from massfit.constants import AU_PER_PC
    from massfit.errors import ConfigError

    data = observations.astrometry
    if viewing is None or viewing.ephemeris_body is None or data is None:
        return observations
    key = "viewing.ephemeris_body (--ephemeris-body)"
    if data.has_sight or np.any(np.isfinite(data.distance)):
        raise ConfigError("the data already give the primary's direction or distance per "
                          "row; use either those columns or an ephemeris body, not both",
                          key=key)
    try:
        ra, dec, distance = ephemeris_sight(viewing.ephemeris_body, data.time,
                                            site=viewing.site, ephemeris=viewing.ephemeris)
    except (KeyError, ValueError, OSError) as exc:
        from astropy.coordinates import solar_system_ephemeris

        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise ConfigError(f"cannot place '{viewing.ephemeris_body}' with the ephemeris "
                          f"'{viewing.ephemeris}' ({reason}); bodies: "
                          f"{', '.join(solar_system_ephemeris.bodies)}; an ephemeris is "
                          f"'builtin' or the path of a JPL .bsp kernel", key=key) from None
    astrometry = replace(data, primary_ra=ra, primary_dec=dec, distance=distance / AU_PER_PC)
    return replace(observations, astrometry=astrometry)


def against_equator(inc, node, pole_ra, pole_dec):
    """Inclination and node (deg) of orbits against a body's equator.

    Parameters
    ----------
    inc, node : array_like
        ICRS inclination and node (rad).
    pole_ra, pole_dec : float
        The body's north pole (rad).

    Returns
    -------
    inclination, node : ndarray
        The angle between the orbit's pole W = (sin i sin node, -sin i cos node, cos i)
        and the body's, and the ascending node on the body's equator counted from
        the ascending node of that equator on the ICRS equator (the IAU's origin of
        planetocentric node longitudes), deg.
    """
    pole = sky_basis(pole_ra, pole_dec)[0][0]
    inc, node = np.asarray(inc, dtype=float), np.asarray(node, dtype=float)
    w_vec = np.stack([np.sin(inc) * np.sin(node), -np.sin(inc) * np.cos(node), np.cos(inc)],
                     axis=-1)
    inclination = np.degrees(np.arccos(np.clip(w_vec @ pole, -1.0, 1.0)))
    origin = np.cross([0.0, 0.0, 1.0], pole)
    origin /= np.linalg.norm(origin)
    ahead = np.cross(pole, origin)
    line = np.cross(pole, w_vec)  # towards the orbit's ascending node on the equator
    node_eq = np.degrees(np.arctan2(line @ ahead, line @ origin)) % 360.0
    return inclination, node_eq


def viewing_from_settings(settings: dict, *, key_prefix="viewing.", file=None):
    """A :class:`ViewingSpec` from config keys or command-line options (None if empty).

    ``settings`` may hold ``ephemeris_body``, ``ephemeris``, ``site`` (longitude,
    latitude and height, each ``"VALUE UNIT"``), ``offsets``, ``pole_ra`` and
    ``pole_dec`` (``"VALUE UNIT"``); None values are ignored.
    """
    import astropy.units as u

    from massfit.quantities import parse_quantity
    from massfit.errors import ConfigError

    settings = {k: v for k, v in settings.items() if v is not None}
    if not settings:
        return None

    def key(name):
        return key_prefix + (name.replace("_", "-") if key_prefix == "--" else name)

    offsets = settings.get("offsets", "astrometric")
    if offsets not in OFFSET_KINDS:
        raise ConfigError(f"unknown kind of offsets '{offsets}'; accepted: "
                          f"{', '.join(OFFSET_KINDS)}", key=key("offsets"), file=file)
    site = None
    if "site" in settings:
        site = _site(settings["site"], key("site"), file)
    pole = [settings.get(name) for name in ("pole_ra", "pole_dec")]
    if (pole[0] is None) != (pole[1] is None):
        raise ConfigError("the pole needs both its right ascension and its declination",
                          key=key("pole_dec" if pole[1] is None else "pole_ra"), file=file)
    if pole[0] is not None:
        pole = [float(parse_quantity(v, expect=u.rad, key=key(n), file=file).to_value(u.rad))
                for v, n in zip(pole, ("pole_ra", "pole_dec"))]
        if abs(pole[1]) > 0.5 * np.pi:
            raise ConfigError("a declination lies between -90 and +90 deg",
                              key=key("pole_dec"), file=file)
    ephemeris = settings.get("ephemeris", EPHEMERIS_DEFAULT)
    if ephemeris != EPHEMERIS_DEFAULT and not Path(ephemeris).is_file():
        raise ConfigError(f"'{ephemeris}' is not a file; give 'builtin' or the path of a "
                          f"JPL kernel (.bsp)", key=key("ephemeris"), file=file)
    return ViewingSpec(ephemeris_body=settings.get("ephemeris_body"), ephemeris=ephemeris,
                       site=site, offsets=offsets, pole_ra=pole[0], pole_dec=pole[1])


def _site(values, key, file):
    """An EarthLocation from [longitude, latitude, height], each "VALUE UNIT"."""
    import astropy.units as u
    from astropy.coordinates import EarthLocation

    from massfit.quantities import parse_quantity
    from massfit.errors import ConfigError

    if isinstance(values, str):
        values = values.split(",")
    if len(values) != 3:
        raise ConfigError("a site is its longitude, latitude and height, e.g. "
                          "['-70.7 deg', '-30.2 deg', '2200 m']", key=key, file=file)
    lon, lat = (parse_quantity(str(v).strip(), expect=u.deg, key=key, file=file)
                for v in values[:2])
    height = parse_quantity(str(values[2]).strip(), expect=u.m, key=key, file=file)
    if abs(lat.to_value(u.deg)) > 90:
        raise ConfigError("the latitude lies between -90 and +90 deg", key=key, file=file)
    return EarthLocation.from_geodetic(lon, lat, height)
